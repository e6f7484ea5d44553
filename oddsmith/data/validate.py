"""The validate stage: raw file + contract + config → typed Parquet snapshot and a report.

Besides the contract, validate checks what later stages will need of the data, so that a
build stops here rather than after the fits: the split and folds (through the split's own
checks, :func:`oddsmith.data.split.feasibility`), blanks in the groups to assess and in features
that refuse them, levels seen only in a test part the cut-off date already fixes, and enough
rows for every unpenalised candidate's parameters. Nothing is written unless every check
passes; the raw file is only read.
"""

from __future__ import annotations

import logging
import math
import os
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

from oddsmith.data.contract import PIECE_ROWS, ContractCheck, load_contract, read_raw_pieces
from oddsmith.data.split import feasibility
from oddsmith.errors import ContractError, DataError, quoted
from oddsmith.evidence.filehash import sha256_remembered
from oddsmith.io import (parquet_columns, read_parquet, sha256_file, write_bytes_atomic, write_json,
                         write_parquet_chunks, write_text)

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
    return problems + _band_problems(config["fairness"], declared)


def _band_problems(fairness: dict, declared: dict) -> list[str]:
    """A numeric sensitive attribute needs bands (each value would be a group of its own);
    bands apply to numeric columns only."""
    bands, problems = fairness.get("bands", {}), []
    for name in fairness["sensitive"]:
        kind = declared.get(name, {}).get("type")
        if kind in ("integer", "float") and name not in bands:
            problems.append(
                f"fairness.sensitive: '{name}' is numeric ({kind} in the contract), so every distinct value "
                f"would be a group of its own; give round-number bands, e.g. {{name: {name}, bands: [30, 45, 60]}}, "
                f"or, if its numbers are codes (1 = ..., 2 = ...), declare it `type: category` in the contract"
            )
        if name in bands and kind not in (None, "integer", "float"):
            problems.append(f"fairness.sensitive: '{name}' has bands, but the contract types it as {kind}; "
                            "bands apply to integer and float columns only")
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


def planned_parameters(config: dict, contract: dict, *, features: list[str] | None = None) -> int:
    """Parameters of the largest planned design: intercept + every feature column + interactions.

    Categoricals count their declared levels − 1; a missing indicator adds one; a spline
    adds knots − 2 columns beyond the linear term; bins add bins − 1 columns. ``features``
    (a candidate's subset) counts only those features and the interactions among them.
    """
    width = {}
    for f in config["features"]:
        if features is not None and f["name"] not in features:
            continue
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
    return profile_columns(df.items(), ids=df[id_column], y=df[target], n_parameters=n_parameters)


def profile_columns(columns, *, ids: pd.Series, y: pd.Series, n_parameters: int) -> dict:
    """:func:`quality_profile` from ``(name, values)`` pairs taken one at a time (so that a
    large snapshot can be profiled column by column), the id and target columns given apart."""
    n = len(ids)
    events = int(y.sum())
    minority = min(events, n - events)
    profile = {}
    for name, s in columns:
        counts = s.value_counts(dropna=False)  # one hashing pass gives both the top share and the distinct count
        missing = int(s.isna().sum())
        profile[name] = {
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
        "columns": len(profile),
        "column_profile": profile,
        "constant_columns": [c for c, v in profile.items() if v["distinct"] <= 1],
        "near_constant_columns": [c for c, v in profile.items() if v["distinct"] > 1 and v["top_share"] >= NEAR_CONSTANT_SHARE],
        "duplicate_ids": int(ids.duplicated().sum()),
        "target": {"events": events, "non_events": n - events, "event_rate": events / n},
        "planned_parameters": n_parameters,
        "events_per_parameter": epv,
        "epv_source": "Peduzzi et al., J. Clinical Epidemiology 49 (1996): warn below 10",
        "warnings": warnings,
    }


def analysis_columns(config: dict) -> list[str]:
    """The columns :func:`analysis_problems` and :func:`cluster_problems` look at (besides the
    blanks of features, which they can take as counts)."""
    data, split, fairness = config["data"], config["split"], config["fairness"]
    names = [data["id_column"], data["target"], data["date_column"], split.get("group_column"),
             (config.get("inference") or {}).get("cluster_column"), *fairness["sensitive"], *fairness["segments"],
             *(f["name"] for f in config["features"] if f["type"] == "categorical")]
    return list(dict.fromkeys(n for n in names if n))


def analysis_problems(df: pd.DataFrame, *, config: dict, contract: dict, blanks: dict | None = None) -> list[str]:
    """Conditions later stages need, checked on the typed data before anything is written.

    Uses ``config`` keys ``data``, ``features``, ``interactions``, ``fairness``, ``split``
    (method, test_fraction, cutoff_date, group_column), ``cross_validation`` (folds) and
    ``candidates`` (name, kind, features); no seed is read, so a change of seed needs no new
    check. ``df`` needs the :func:`analysis_columns`; the blank cells of the features come
    from ``blanks`` (column → [count, first ids], as :class:`oddsmith.data.contract.ContractCheck`
    counts them) or, without it, from ``df``.
    """
    data, ids = config["data"], df[config["data"]["id_column"]]
    if blanks is None:
        blanks = {f["name"]: _blanks(df[f["name"]], ids) for f in config["features"]}
    problems = _group_problems(df, config["fairness"], ids) + _blank_feature_problems(blanks, config["features"])
    plan = feasibility(
        df, id_column=data["id_column"], target=data["target"],
        split=config["split"] | {"date_column": data["date_column"]}, cross_validation=config["cross_validation"],
    )
    problems += plan["problems"]
    if plan["is_test"] is not None:
        problems += _test_only_level_problems(df, config["features"], plan["is_test"], ids)
    if plan["train_rows"] is not None:
        problems += _fit_size_problems(config, contract, plan["train_rows"])
    return problems


def _id_examples(ids: pd.Series, mask: np.ndarray, limit: int = 5) -> str:
    return ", ".join(quoted(v) for v in ids[mask].head(limit).tolist())


def _group_problems(df: pd.DataFrame, fairness: dict, ids: pd.Series) -> list[str]:
    """Every row of an assessed attribute needs a group; and there must be two groups."""
    problems = []
    for key in ("sensitive", "segments"):
        for name in fairness[key]:
            missing = df[name].isna().to_numpy()
            blank_label = fairness.get("blank_groups", {}).get(name)
            if blank_label is not None and blank_label in set(df[name].dropna().astype(str)):
                problems.append(f"fairness.{key}: the label {quoted(blank_label)} given to the blank cells of "
                                f"'{name}' is also one of its values; choose a label the data does not use")
            if missing.any() and blank_label is None:
                problems.append(
                    f"fairness.{key}: column '{name}' is blank in {int(missing.sum())} row(s), e.g. ids "
                    f"{_id_examples(ids, missing)}; every row needs a group: fill them in the data with an "
                    + f"explicit group, or make the blanks a group of their own: {{name: {name}, blanks: not stated}}"
                )
                continue
            edges = fairness.get("bands", {}).get(name)
            if edges is None and df[name].nunique() < 2:
                problems.append(f"fairness.{key}: attribute '{name}' has a single group "
                                f"{quoted(df[name].iloc[0])}; nothing to compare")
            elif edges is not None and _bands_used(df[name], edges) < 2:
                problems.append(f"fairness.{key}: every value of '{name}' falls in one band of {quoted(edges)}; "
                                "nothing to compare: choose band edges inside the values' range")
    return problems


def _bands_used(values: pd.Series, edges: list) -> int:
    """How many of the bands (see :func:`oddsmith.assessment.fairness.attribute_groups`) hold a value;
    counted here so that validate does not depend on the fairness module."""
    numbers = values.to_numpy(dtype=float)
    return len(np.unique(np.searchsorted(np.asarray(edges, dtype=float), numbers, side="right")))


def _blanks(values: pd.Series, ids: pd.Series) -> list:
    missing = values.isna().to_numpy()
    return [int(missing.sum()), ids[missing].head(5).tolist()]


def _blank_feature_problems(blanks: dict, features: list) -> list[str]:
    problems = []
    for f in features:
        count, examples = blanks.get(f["name"], [0, []])
        if f["missing"] == "reject" and count:
            problems.append(
                f"features.{f['name']}: blank in {count} row(s), e.g. ids {', '.join(quoted(v) for v in examples)}; "
                "the feature has missing: reject (set missing: indicator to model blanks, or fill them in the data)"
            )
    return problems


def _test_only_level_problems(df: pd.DataFrame, features: list, is_test: np.ndarray, ids: pd.Series) -> list[str]:
    """Levels of a categorical found only in the test part, which the recipe cannot map.

    The recipe maps an unseen level to 'other' only under ``missing: indicator`` and when an
    'other' level is learned (a training level rarer than ``min_count``, or one named so).
    """
    problems = []
    for f in (f for f in features if f["type"] == "categorical"):
        text = df[f["name"]].astype("string")
        train_counts = text[~is_test].value_counts()
        has_other = "other" in train_counts.index or bool((train_counts < f["min_count"]).any())
        if f["missing"] == "indicator" and has_other:
            continue
        unseen = (is_test & ~text.isin(train_counts.index).to_numpy() & text.notna().to_numpy())
        if unseen.any():
            levels = sorted(set(text[unseen].tolist()))
            problems.append(
                f"features.{f['name']}: level(s) {', '.join(quoted(v) for v in levels[:5])} occur only in the test "
                f"part (dated on or after split.cutoff_date), in {int(unseen.sum())} row(s), e.g. ids "
                f"{_id_examples(ids, unseen)}; the model cannot score a level it never saw: move the cut-off "
                "date, or set missing: indicator so rare and unseen levels join 'other'"
            )
    return problems


#: Kinds fitted by maximum likelihood without a penalty: they need more rows than parameters.
UNPENALISED_KINDS = ("logit", "probit", "cloglog")


def _fit_size_problems(config: dict, contract: dict, train_rows: int) -> list[str]:
    """An unpenalised candidate with more parameters than the rows of its smallest fold fit
    has no estimate at all (the design cannot have full column rank): a hard stop. Some fold
    holds out at least ceil(n/k) rows, so its fit sees at most n - ceil(n/k)."""
    folds = config["cross_validation"]["folds"]
    fold_rows = train_rows - math.ceil(train_rows / folds)
    too_wide = []
    for c in config["candidates"]:
        n_parameters = planned_parameters(config, contract, features=c.get("features"))
        if c["kind"] in UNPENALISED_KINDS and n_parameters > fold_rows:
            too_wide.append(f"{c['name']} ({c['kind']}, {n_parameters} parameters)")
    if not too_wide:
        return []
    return [
        f"candidates: {', '.join(too_wide)} have more parameters than the at most {fold_rows} rows a "
        f"cross-validation fit sees ({train_rows} training rows, {folds} folds), so no unpenalised fit is "
        "possible: use fewer features, a penalised kind (l1, l2, elastic_net), or more rows"
    ]


# Rows per row group of the validated Parquet snapshot.
PARQUET_CHUNK_ROWS = 131_072


def run_validate(*, config: dict, data_path: str, contract_path: str, out_data: str, out_report: str, out_summary: str,
                 out_contract: str | None = None, piece_rows: int = PIECE_ROWS, hash_cache: str | None = None) -> dict:
    """Check the raw data against contract and config; write the snapshot, report, summary,
    and a byte copy of the contract (so a results folder carries the contract it was checked by).

    ``hash_cache``: the project's remembered file hashes (:mod:`oddsmith.evidence.filehash`). The
    workflow hashes the raw file when it starts, so in a build the report's SHA-256 of it
    comes from there while the file is unchanged, rather than from a second reading of every
    byte; without it (or after a change) the file is read.

    The file is read, typed and checked ``piece_rows`` rows at a time; the typed rows go
    straight into a scratch Parquet file beside ``out_data`` (row groups of
    ``PARQUET_CHUNK_ROWS``, whatever ``piece_rows`` is), which the checks that need whole
    columns then read a few columns at a time. The scratch file becomes ``out_data`` only
    when every check has passed, and is removed otherwise.
    """
    contract = load_contract(contract_path)
    problems = config_contract_problems(config, contract)
    if problems:
        raise ContractError("the configuration and the data contract disagree", problems)
    data = config["data"]
    check = ContractCheck(contract, id_column=data["id_column"], target=data["target"],
                          positive_label=data["positive_label"], extra_columns=data["extra_columns"],
                          source=str(data_path))

    def pieces(columns=None):
        return read_raw_pieces(data_path, encoding=data["encoding"], rows=piece_rows, columns=columns)

    folder_existed = Path(out_data).parent.exists()
    scratch = _scratch_name(out_data)
    try:
        write_parquet_chunks(scratch, _row_groups(check, pieces(), PARQUET_CHUNK_ROWS))
        check.finish(pieces)
        _store_whole_numbers(scratch, check.whole_number_columns())
        report = _checked_report(scratch, check, config=config, contract=contract)
        raw_sha256 = sha256_remembered([data_path], cache=hash_cache)[str(data_path)]
        report["source"] = {"path": str(data_path), "sha256": raw_sha256, "contract": str(contract_path),
                            "contract_sha256": sha256_file(contract_path)}
        report["ignored_columns"] = [c for c in check.raw_columns if c not in contract["columns"]]
        report["target_encoding"] = f"{data['target']} = 1 where the raw value is {data['positive_label']!r}, else 0"
        for w in report["warnings"]:
            log.warning(w)
        os.replace(scratch, out_data)
    except BaseException:
        Path(scratch).unlink(missing_ok=True)
        if not folder_existed and not any(Path(out_data).parent.iterdir()):
            Path(out_data).parent.rmdir()  # a refused file leaves nothing behind, not even a folder
        raise
    write_json(out_report, report)
    write_text(out_summary, render_summary(report))
    if out_contract:
        write_bytes_atomic(out_contract, Path(contract_path).read_bytes())
    return report


def _scratch_name(out_data: str) -> Path:
    """A free name beside ``out_data`` (hidden, ``.part`` like every interrupted write)."""
    path = Path(out_data)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, name = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".unchecked.part")
    os.close(fd)
    return Path(name)


def _row_groups(check: ContractCheck, pieces, rows: int):
    """Type and check every raw piece; yield the typed rows in frames of ``rows`` rows.

    Once a piece has failed a check nothing more is yielded (the scratch file will be
    removed), but every later piece is still checked, so that all problems are reported.
    """
    held, count, written, empty = [], 0, False, None
    for raw in pieces:
        typed = check.add(raw)
        raw = None  # noqa: F841 (the text of this piece may go before the next is read)
        empty = typed.iloc[:0] if empty is None else empty
        if check.problems:
            held, count = [], 0
            continue
        held.append(typed)
        count += len(typed)
        while count >= rows:
            block = pd.concat(held, ignore_index=True) if len(held) > 1 else held[0]
            yield block.iloc[:rows]
            written, held = True, [block.iloc[rows:]]
            count = len(held[0])
    if count:
        yield pd.concat(held, ignore_index=True) if len(held) > 1 else held[0]
    elif not written and empty is not None:
        yield empty  # nothing was good: an empty (valid) scratch file, removed after the report


def _store_whole_numbers(path: Path, names: list[str]) -> None:
    """Nullable integer columns without a blank in the whole file are stored as int64 (as a
    whole-file typing gives them); the pieces held them as float64, so the file is rewritten
    one row group at a time."""
    if not names:
        return
    import pyarrow.parquet as pq

    source = pq.ParquetFile(path)

    def groups():
        for i in range(source.metadata.num_row_groups):
            frame = source.read_row_group(i).to_pandas()
            for name in names:
                frame[name] = frame[name].astype("int64")
            yield frame

    rewritten = path.with_name(path.name + ".int")
    try:
        write_parquet_chunks(rewritten, groups())
        os.replace(rewritten, path)
    finally:
        rewritten.unlink(missing_ok=True)


def _checked_report(path: Path, check: ContractCheck, *, config: dict, contract: dict) -> dict:
    """The checks of later stages' needs, then the quality profile, from the typed snapshot
    at ``path`` read a few columns at a time; DataError if the analysis cannot be done."""
    data = config["data"]
    present = parquet_columns(path)
    df = read_parquet(path, columns=[c for c in analysis_columns(config) if c in present])
    problems = analysis_problems(df, config=config, contract=contract, blanks=check.blanks)
    problems += cluster_problems(df, config)
    if problems:
        raise DataError(f"{check.source}: the data cannot support the configured analysis", problems)
    columns = ((name, df[name] if name in df else read_parquet(path, columns=[name])[name]) for name in present)
    report = profile_columns(columns, ids=df[data["id_column"]], y=df[data["target"]],
                             n_parameters=planned_parameters(config, contract))
    if data["date_column"]:
        dates = df[data["date_column"]]
        report["date_range"] = [dates.min().date().isoformat(), dates.max().date().isoformat()]
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
