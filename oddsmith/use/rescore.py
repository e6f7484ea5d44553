"""Rescore one row: its probability and decision before and after changing some inputs.

The row comes from a data file (by id) or from a JSON record. Every changed value is
written as the text a CSV cell would hold and goes through the same data contract and
feature recipe as a scored batch, so a value the contract does not allow (out of range,
unknown level, empty where not nullable) is refused with the contract's reason, and a
value the recipe handles by policy (a missing value filled, an unseen level mapped to
``other``) is flagged. Contributions are those of :mod:`oddsmith.use.score`: on the model's
link scale, relative to the stated reference, interactions split half to each feature.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

from oddsmith.data.contract import read_raw, validate_frame
from oddsmith.errors import ContractError
from oddsmith.fitting.models import inverse_link, linear_predictor
from oddsmith.use.score import (LINK_SCALES, ScoringModel, contributions, design_matrix, feature_weights, flagged,
                            json_value, reason_reference)

RECORD_ID = "(record)"
# Contributions that differ by less than this are "unchanged" (floating-point noise).
UNCHANGED = 1e-12


def parse_settings(items) -> dict:
    """Parse ``feature=value`` strings; an empty value means missing.

    Examples
    --------
    >>> parse_settings(["credit_score=700", "guarantor_score="])
    {'credit_score': '700', 'guarantor_score': None}
    """
    changes = {}
    for item in items or ():
        name, sep, value = item.partition("=")
        name = name.strip()
        if not sep or not name:
            raise ContractError(f"--set expects feature=value, got {item!r}")
        if name in changes:
            raise ContractError(f"--set gives '{name}' twice")
        changes[name] = value if value != "" else None
    return changes


def read_record(text: str) -> dict:
    """A JSON object given inline (starting with ``{``) or as a path to a file."""
    source = text if text.lstrip().startswith("{") else None
    if source is None:
        path = Path(text)
        if not path.is_file():
            raise ContractError(f"--record: {text!r} is neither a JSON object nor a file")
        source = path.read_text(encoding="utf-8")
    try:
        record = json.loads(source)
    except json.JSONDecodeError as exc:
        raise ContractError(f"--record is not valid JSON: {exc}") from None
    if not isinstance(record, dict):
        raise ContractError(f"--record must be a JSON object of column: value, got {type(record).__name__}")
    return record


def row_from_file(sm: ScoringModel, path, row_id: str, *, encoding: str = "utf-8") -> pd.DataFrame:
    """The raw text of the row with id ``row_id`` in a CSV file (declared columns only)."""
    raw = read_raw(path, encoding=encoding)
    if sm.id_column not in raw.columns:
        raise ContractError(f"{path}: no id column '{sm.id_column}'")
    hits = raw[raw[sm.id_column] == str(row_id)]
    if len(hits) == 0:
        raise ContractError(f"{path}: no row with {sm.id_column} = {row_id!r}")
    if len(hits) > 1:
        raise ContractError(f"{path}: {len(hits)} rows have {sm.id_column} = {row_id!r}; ids must be unique")
    return hits[[c for c in hits.columns if c in sm.contract["columns"]]].reset_index(drop=True)


def row_from_record(sm: ScoringModel, record: dict) -> pd.DataFrame:
    """A one-row raw frame from a JSON record; values become CSV text, null becomes missing."""
    unknown = [k for k in record if k not in sm.contract["columns"]]
    if unknown:
        raise ContractError(f"record: column(s) {unknown} are not declared in the data contract")
    cells = {k: _as_cell(k, v) for k, v in record.items()}
    cells.setdefault(sm.id_column, RECORD_ID)
    return pd.DataFrame({k: pd.Series([v], dtype=object) for k, v in cells.items()})


def _as_cell(name: str, value):
    if value is None:
        return None
    if isinstance(value, bool) or isinstance(value, (list, dict)):
        raise ContractError(f"record: '{name}' must be a number or text, got {json.dumps(value)}")
    return repr(value) if isinstance(value, float) else str(value)


def rescore_row(sm: ScoringModel, row: pd.DataFrame, changes: dict, *, reference: dict | None = None) -> dict:
    """Score a raw row before and after ``changes`` (column -> CSV text or None).

    Returns
    -------
    dict
        ``id``; ``before`` and ``after`` (``probability``, ``decision``,
        ``linear_predictor``, ``flags``); ``cutoff``; ``changes`` (column, before, after);
        ``contributions``: every feature whose input or contribution changed, with its
        contribution before and after; ``scale`` and ``reference``.

    Raises
    ------
    ContractError
        A change names an unknown column, the id or the target, or a value the contract
        refuses (the contract's reason is given).
    """
    _check_change_names(sm, changes)
    reference = reference or reason_reference(sm)
    before = _typed(sm, row, "the row itself breaks the data contract")
    edited = row.copy()
    for name, value in changes.items():
        edited[name] = pd.Series([value], dtype=object)
    after = _typed(sm, edited, "refused: the changed values break the data contract")
    names, _ = feature_weights(sm.recipe, sm.model["design_columns"])
    states = [_state(sm, frame, reference) for frame in (before, after)]
    rows = []
    for i, name in enumerate(names):
        c0, c1 = states[0]["contrib"][i], states[1]["contrib"][i]
        if name in changes or abs(c1 - c0) > UNCHANGED:
            rows.append({"feature": name, "input_changed": name in changes, "before": c0, "after": c1,
                         "change": c1 - c0})
    return {
        "id": str(row[sm.id_column].iloc[0]) if sm.id_column in row.columns else RECORD_ID,
        "candidate": sm.candidate, "link": sm.link, "cutoff": sm.cutoff,
        "before": {k: v for k, v in states[0].items() if k != "contrib"},
        "after": {k: v for k, v in states[1].items() if k != "contrib"},
        "changes": [{"column": n, "before": json_value(before[n].iloc[0]) if n in before else None,
                     "after": json_value(after[n].iloc[0]) if n in after else None} for n in changes],
        "contributions": rows,
        "scale": LINK_SCALES[sm.link],
        "reference": reference["method"],
    }


def _check_change_names(sm: ScoringModel, changes: dict) -> None:
    problems = []
    for name in changes:
        if name == sm.id_column or name == sm.target:
            problems.append(f"'{name}' is the {'id column' if name == sm.id_column else 'target'}; it cannot be set")
        elif name not in sm.contract["columns"]:
            features = ", ".join(r["name"] for r in sm.recipe["features"])
            problems.append(f"'{name}' is not a column of the data contract (model features: {features})")
    if problems:
        raise ContractError("cannot apply the changes", problems)


def _typed(sm: ScoringModel, raw: pd.DataFrame, message: str) -> pd.DataFrame:
    contract = dict(sm.contract, _target=sm.target)
    try:
        return validate_frame(raw, contract, id_column=sm.id_column, target=None, extra_columns="reject")
    except ContractError as exc:
        raise ContractError(message, exc.problems or [str(exc)]) from None


def _state(sm: ScoringModel, typed: pd.DataFrame, reference: dict) -> dict:
    X, flags = design_matrix(sm, typed)
    eta = linear_predictor(sm.model, X)
    p = inverse_link(sm.link, eta)
    return {"probability": float(p[0]), "decision": "flag" if flagged(p, sm.cutoff)[0] else "pass",
            "linear_predictor": float(eta[0]), "flags": [c for c in flags.columns if bool(flags[c].iloc[0])],
            "contrib": contributions(sm, X, reference)[0].tolist()}


def format_rescore(result: dict) -> str:
    """Plain-text report of a rescored row."""
    b, a = result["before"], result["after"]
    cutoff = "none (no row is flagged)" if result["cutoff"] is None else f"{result['cutoff']:.4f}"
    lines = [f"row {result['id']}: model {result['candidate']} ({result['link']} link), cut-off {cutoff}",
             f"{'':14}{'before':>12}{'after':>12}",
             f"{'probability':14}{b['probability']:>12.4f}{a['probability']:>12.4f}",
             f"{'decision':14}{b['decision']:>12}{a['decision']:>12}"]
    for change in result["changes"]:
        lines.append(f"set {change['column']}: {_show(change['before'])} -> {_show(change['after'])}")
    for key, state in (("before", b), ("after", a)):
        if state["flags"]:
            lines.append(f"recipe policy applied {key}: {', '.join(state['flags'])}")
    lines.append(f"contributions ({result['scale']}; reference: {result['reference']}):")
    for row in result["contributions"]:
        why = "" if row["input_changed"] else "  (input unchanged; through an interaction)"
        lines.append(f"  {row['feature']:24}{row['before']:+.4f} -> {row['after']:+.4f}  ({row['change']:+.4f}){why}")
    if not result["contributions"]:
        lines.append("  (no feature of the model changed)")
    return "\n".join(lines) + "\n"


def _show(value) -> str:
    return "(missing)" if value is None else str(value)
