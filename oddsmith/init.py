"""Draft a data contract and a configuration for a new data file (``oddsmith init``).

The drafts are starting points marked DRAFT for the user to review: types, observed ranges
and category lists come from the file; the id column and target are guesses.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import yaml

from oddsmith.contract import read_raw
from oddsmith.errors import OddsmithError

MAX_LEVELS = 30


def _infer_column(text: pd.Series) -> dict:
    values = text.dropna()
    spec: dict = {}
    numbers = pd.to_numeric(values, errors="coerce")
    dates = pd.to_datetime(values, format="%Y-%m-%d", errors="coerce")
    if len(values) and numbers.notna().all():
        whole = bool((numbers == numbers.round()).all())
        spec["type"] = "integer" if whole else "float"
        spec["min"], spec["max"] = _plain(numbers.min()), _plain(numbers.max())
    elif len(values) and dates.notna().all():
        spec["type"] = "date"
        spec["min"], spec["max"] = dates.min().date().isoformat(), dates.max().date().isoformat()
    elif values.nunique() <= MAX_LEVELS:
        spec["type"] = "category"
        spec["levels"] = sorted(values.unique().tolist())
    else:
        spec["type"] = "string"
    if text.isna().any():
        spec["nullable"] = True
    return spec


def _plain(x):
    x = float(x)
    return int(x) if x.is_integer() else x


def _guess_roles(raw: pd.DataFrame, columns: dict) -> tuple[str, str]:
    n = len(raw)
    ids = [c for c in raw.columns if raw[c].notna().all() and raw[c].nunique() == n and columns[c]["type"] != "float"]
    binary = [c for c in raw.columns if columns[c]["type"] in ("category", "integer") and raw[c].dropna().nunique() == 2]
    id_column = next((c for c in ids if "id" in c.lower()), ids[0] if ids else raw.columns[0])
    target = binary[-1] if binary else raw.columns[-1]
    return id_column, target


def draft(data_path: str | Path, *, contract_out: str | Path, config_out: str | Path, run: str | None = None) -> tuple[Path, Path]:
    """Write a draft contract and config for ``data_path``; never overwrite existing files."""
    contract_out, config_out = Path(contract_out), Path(config_out)
    existing = [str(p) for p in (contract_out, config_out) if p.exists()]
    if existing:
        raise OddsmithError("refusing to overwrite existing file(s): " + ", ".join(existing) + "; choose other paths")
    raw = read_raw(data_path)
    columns = {c: _infer_column(raw[c]) for c in raw.columns}
    id_column, target = _guess_roles(raw, columns)
    columns[id_column]["unique"] = True
    if columns[target]["type"] != "category":
        columns[target] = {"type": "category", "levels": sorted(raw[target].dropna().unique().tolist())}
    contract = {
        "format": "oddsmith-contract/1",
        "description": f"DRAFT drafted by `oddsmith init` from {Path(data_path).name}: review every line.",
        "columns": columns,
    }
    dates = [c for c, s in columns.items() if s["type"] == "date"]
    features = [
        {"name": c, "type": "numeric" if s["type"] in ("integer", "float") else "categorical"}
        | ({"missing": "indicator"} if s.get("nullable") else {})
        for c, s in columns.items()
        if c not in (id_column, target) and s["type"] in ("integer", "float", "category")
    ]
    levels = columns[target]["levels"]
    config = {
        "run": run or Path(data_path).stem.replace(" ", "_")[:60] or "analysis",
        "data": {"path": str(data_path), "contract": str(contract_out), "id_column": id_column, "target": target,
                 "positive_label": str(levels[-1]), "date_column": dates[0] if dates else None},
        "features": features,
        "split": {"method": "stratified", "test_fraction": 0.25, "seed": 1},
        "candidates": [{"name": "logit_all", "kind": "logit"}, {"name": "ridge", "kind": "l2", "grid": [0.01, 0.1, 1.0]}],
        "costs": {"false_positive": 1, "false_negative": 5},
        "card": {"title": "DRAFT model", "version": "0.1.0", "owner": "DRAFT: name the accountable team",
                 "intended_use": "DRAFT: say what decisions the model supports and for whom."},
    }
    contract_out.parent.mkdir(parents=True, exist_ok=True)
    config_out.parent.mkdir(parents=True, exist_ok=True)
    header = "# DRAFT written by `oddsmith init`: review every line before use.\n"
    contract_out.write_text(header + yaml.safe_dump(contract, sort_keys=False, allow_unicode=True), encoding="utf-8")
    guess = f"# Guessed: id column '{id_column}', target '{target}' (positive label '{levels[-1]}'). Check them.\n"
    config_out.write_text(header + guess + yaml.safe_dump(config, sort_keys=False, allow_unicode=True), encoding="utf-8")
    return contract_out, config_out
