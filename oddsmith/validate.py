"""The validate stage: raw file + contract + config → typed Parquet snapshot and a report.

Nothing is written unless every check passes; the raw file is only read.
"""

from __future__ import annotations

import logging
from pathlib import Path

import pandas as pd

from oddsmith.contract import load_contract, read_raw, validate_frame
from oddsmith.errors import ContractError
from oddsmith.io import sha256_file, write_bytes_atomic, write_json, write_parquet_chunks, write_text

log = logging.getLogger("oddsmith.validate")

#: Peduzzi et al., J. Clinical Epidemiology 49 (1996): fewer than 10 events per
#: estimated parameter makes logistic estimates unreliable.
MIN_EVENTS_PER_PARAMETER = 10
NEAR_CONSTANT_SHARE = 0.99


def config_contract_problems(config: dict, contract: dict) -> list[str]:
    """Columns the config uses that the contract does not declare, or declares with another type."""
    declared = contract["columns"]
    problems = []
    data = config["data"]
    used = [("data.id_column", data["id_column"]), ("data.target", data["target"])]
    if data["date_column"]:
        used.append(("data.date_column", data["date_column"]))
    if config["split"].get("group_column"):
        used.append(("split.group_column", config["split"]["group_column"]))
    if (config.get("inference") or {}).get("cluster_column"):
        used.append(("inference.cluster_column", config["inference"]["cluster_column"]))
    used += [("fairness.sensitive", n) for n in config["fairness"]["sensitive"]]
    used += [("fairness.segments", n) for n in config["fairness"]["segments"]]
    used += [("features", f["name"]) for f in config["features"]]
    for key, name in used:
        if name not in declared:
            problems.append(f"{key}: column '{name}' is not declared in the data contract")
    for f in config["features"]:
        kind = declared.get(f["name"], {}).get("type")
        if f["type"] == "numeric" and kind not in (None, "integer", "float"):
            problems.append(f"features.{f['name']}: declared numeric, but the contract types it as {kind}")
        if f["type"] == "categorical" and kind not in (None, "category", "string"):
            problems.append(f"features.{f['name']}: declared categorical, but the contract types it as {kind}")
    if data["date_column"] and declared.get(data["date_column"], {}).get("type") not in (None, "date"):
        problems.append(f"data.date_column: '{data['date_column']}' is not typed date in the contract")
    return problems


def cluster_problems(df: pd.DataFrame, config: dict) -> list[str]:
    """A cluster column (inference.cluster_column) needs a label on every row and two clusters."""
    column = (config.get("inference") or {}).get("cluster_column")
    if not column:
        return []
    labels = df[column]
    missing = labels.isna().to_numpy()
    if missing.any():
        ids = df.loc[missing, config["data"]["id_column"]].head(5).tolist()
        return [f"inference.cluster_column: '{column}' is empty on {int(missing.sum())} rows (e.g. ids {ids}); "
                "every row needs a cluster"]
    if labels.nunique() < 2:
        return [f"inference.cluster_column: '{column}' has a single value {labels.iloc[0]!r}; cluster-robust "
                "standard errors need at least two clusters"]
    return []


def planned_parameters(config: dict, contract: dict) -> int:
    """Parameters of the largest planned design: intercept + every feature column + interactions.

    Categoricals count their declared levels − 1; a missing indicator adds one; a spline
    adds knots − 2 columns beyond the linear term; bins add bins − 1 columns.
    """
    width = {}
    for f in config["features"]:
        spec = contract["columns"].get(f["name"], {})
        if f["type"] == "categorical":
            n = max(len(spec.get("levels", [])) - 1, 1)
        elif f["transform"] == "spline":
            n = f["knots"] - 1
        elif f["transform"] == "bins":
            n = f["bins"] - 1
        else:
            n = 1
        width[f["name"]] = n + (1 if f["missing"] == "indicator" else 0)
    inter = sum(width[a] * width[b] for a, b in config["interactions"] if a in width and b in width)
    return 1 + sum(width.values()) + inter


def quality_profile(df: pd.DataFrame, *, id_column: str, target: str, n_parameters: int) -> dict:
    """Rows, columns, missing shares, (near-)constant columns, duplicates, balance, EPV."""
    n = len(df)
    events = int(df[target].sum())
    minority = min(events, n - events)
    columns = {}
    for name in df.columns:
        s = df[name]
        counts = s.value_counts(dropna=False)  # one hashing pass gives both the top share and the distinct count
        missing = int(s.isna().sum())
        columns[name] = {
            "dtype": str(s.dtype),
            "missing_share": missing / n,
            "distinct": int(len(counts) - (1 if missing else 0)),
            "top_share": float(counts.iloc[0] / n),
        }
    epv = minority / n_parameters
    warnings = []
    if epv < MIN_EVENTS_PER_PARAMETER:
        warnings.append(
            f"events per parameter {epv:.1f} < {MIN_EVENTS_PER_PARAMETER} (Peduzzi et al. 1996): "
            "estimates may be unstable; reduce the planned parameters or gather more events"
        )
    return {
        "rows": n,
        "columns": len(df.columns),
        "column_profile": columns,
        "constant_columns": [c for c, v in columns.items() if v["distinct"] <= 1],
        "near_constant_columns": [c for c, v in columns.items() if v["distinct"] > 1 and v["top_share"] >= NEAR_CONSTANT_SHARE],
        "duplicate_ids": int(df[id_column].duplicated().sum()),
        "target": {"events": events, "non_events": n - events, "event_rate": events / n},
        "planned_parameters": n_parameters,
        "events_per_parameter": epv,
        "epv_source": "Peduzzi et al., J. Clinical Epidemiology 49 (1996): warn below 10",
        "warnings": warnings,
    }


# Rows per row group of the validated Parquet snapshot.
PARQUET_CHUNK_ROWS = 131_072


def run_validate(*, config: dict, data_path: str, contract_path: str, out_data: str, out_report: str, out_summary: str,
                 out_contract: str | None = None) -> dict:
    """Check the raw data against contract and config; write the snapshot, report, summary,
    and a byte copy of the contract (so a results folder carries the contract it was checked by)."""
    contract = load_contract(contract_path)
    problems = config_contract_problems(config, contract)
    if problems:
        raise ContractError("the configuration and the data contract disagree", problems)
    data = config["data"]
    raw = read_raw(data_path, encoding=data["encoding"])
    df = validate_frame(
        raw, contract, id_column=data["id_column"], target=data["target"],
        positive_label=data["positive_label"], extra_columns=data["extra_columns"], source=str(data_path),
    )
    problems = [
        f"fairness: attribute '{name}' has a single group {sorted(df[name].dropna().unique().tolist())}; nothing to compare"
        for name in config["fairness"]["sensitive"] + config["fairness"]["segments"]
        if df[name].nunique(dropna=True) < 2
    ]
    problems += cluster_problems(df, config)
    if problems:
        raise ContractError(f"{data_path}: the groups to assess or the clusters cannot be formed", problems)
    report = quality_profile(df, id_column=data["id_column"], target=data["target"],
                             n_parameters=planned_parameters(config, contract))
    report["source"] = {"path": str(data_path), "sha256": sha256_file(data_path), "contract": str(contract_path),
                        "contract_sha256": sha256_file(contract_path)}
    report["ignored_columns"] = [c for c in raw.columns if c not in contract["columns"]]
    del raw  # the all-text copy of the file: the largest object here
    report["target_encoding"] = f"{data['target']} = 1 where the raw value is {data['positive_label']!r}, else 0"
    if data["date_column"]:
        dates = df[data["date_column"]]
        report["date_range"] = [dates.min().date().isoformat(), dates.max().date().isoformat()]
    for w in report["warnings"]:
        log.warning(w)
    # Written in row groups: one piece at a time is converted to Arrow, not the whole frame.
    write_parquet_chunks(out_data, (df.iloc[s:s + PARQUET_CHUNK_ROWS] for s in range(0, max(len(df), 1), PARQUET_CHUNK_ROWS)))
    write_json(out_report, report)
    write_text(out_summary, render_summary(report))
    if out_contract:
        write_bytes_atomic(out_contract, Path(contract_path).read_bytes())
    return report


def render_summary(report: dict) -> str:
    """A short plain-text summary of the validation report."""
    t = report["target"]
    lines = [
        f"Validated {report['source']['path']} (sha256 {report['source']['sha256'][:12]}…)",
        f"  rows {report['rows']:,}, columns {report['columns']}, events {t['events']:,} ({t['event_rate']:.1%})",
        f"  planned parameters {report['planned_parameters']}, events per parameter {report['events_per_parameter']:.1f}",
    ]
    missing = {c: v["missing_share"] for c, v in report["column_profile"].items() if v["missing_share"] > 0}
    for name, share in missing.items():
        lines.append(f"  missing: {name} {share:.1%}")
    for key in ("constant_columns", "near_constant_columns"):
        if report[key]:
            lines.append(f"  {key.replace('_', ' ')}: {', '.join(report[key])}")
    lines += [f"  WARNING: {w}" for w in report["warnings"]]
    return "\n".join(lines) + "\n"
