"""The compare stage: read every candidate's cross-validation results, out-of-fold predictions
and final model, choose one by the configured rule (:mod:`oddsmith.fitting.selection`), and write the
comparison table and the selected candidate with the numbers that decided."""

from __future__ import annotations

import logging

from oddsmith.fitting.selection import compare_candidates
from oddsmith.io import read_json, read_parquet, write_json

log = logging.getLogger("oddsmith.compare")


def run_compare(*, cv_paths: dict, oof_paths: dict, model_paths: dict, selection: dict, out_table: str,
                out_selected: str) -> dict:
    """Build the comparison table, select a candidate, test the others against it."""
    cvs = {name: read_json(path) for name, path in cv_paths.items()}
    models = {name: read_json(path) for name, path in model_paths.items()}
    oofs = {name: read_parquet(path) for name, path in oof_paths.items() if cvs[name]["status"] == "ok"}
    table, selected = compare_candidates(cvs, oofs, models, metric=selection["metric"], rule=selection["rule"],
                                         preference=selection.get("preference"))
    log.info("selected %s: %s", selected["candidate"], selected["reason"])
    write_json(out_table, table)
    write_json(out_selected, selected)
    return selected
