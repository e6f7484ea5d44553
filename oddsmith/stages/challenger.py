"""The challenger stages: the trees on the shared folds (challenger_fit, beside the candidates'
fits) and their gap to the selected candidate (challenger_gap, after compare); the statistics
are :mod:`oddsmith.fitting.challenger`'s."""

from __future__ import annotations

import logging

import pandas as pd

from oddsmith.errors import ArtifactError
from oddsmith.fitting.challenger import KIND, NAME, fold_record, with_gap
from oddsmith.io import read_json, release_arrow_memory, write_json, write_parquet
from oddsmith.stages.fit import training_design

log = logging.getLogger("oddsmith.challenger")


def run_challenger_fit(*, design_path: str, assignment_path: str, recipe_path: str, id_column: str, target: str,
                       settings: dict, threads: int, out_folds: str, out_oof: str) -> dict:
    """Fit the challenger on the shared folds; write its fold metrics and OOF predictions.

    Needs nothing the candidates' fits write, so it runs beside them; the gap to the selected
    candidate is :func:`run_challenger_gap`'s, after the comparison.
    """
    values, names, y, ids, folds, _ = training_design(
        design_path=design_path, assignment_path=assignment_path, recipe_path=recipe_path,
        candidate={"name": NAME, "kind": KIND}, id_column=id_column, target=target)
    # The pages Arrow's pool kept from reading the ids and folds (about 85 MB at 1,000,000
    # rows) would otherwise stay resident under the trees' own allocations.
    release_arrow_memory()
    log.info("challenger: %d rows, %d design columns, %d fold column(s)", len(y), len(names), folds.shape[1])
    record, oof = fold_record(values, names, y, folds, settings=settings, threads=threads)
    del values
    write_parquet(out_oof, pd.DataFrame({"id": ids, "y": y, **oof}))
    write_json(out_folds, record)
    return record


def run_challenger_gap(*, folds_path: str, selected_path: str, cv_paths: dict, out_cv: str) -> dict:
    """The challenger's fold record with its gap to the selected candidate (``challenger/cv.json``)."""
    cv = with_gap(read_json(folds_path), _selected_cv(selected_path, cv_paths), where=folds_path)
    write_json(out_cv, cv)
    log.info("challenger against %s: %s", cv["gap"]["selected"], cv["gap"]["log_loss"])
    return cv


def _selected_cv(selected_path: str, cv_paths: dict) -> dict:
    name = read_json(selected_path)["candidate"]
    if name not in cv_paths:
        raise ArtifactError(f"{selected_path} names candidate {name!r}, which has no cv.json among the inputs",
                            [f"known: {', '.join(sorted(cv_paths))}"])
    cv = read_json(cv_paths[name])
    if cv.get("status") != "ok":
        raise ArtifactError(f"the selected candidate {name!r} has no cross-validation results ({cv_paths[name]})")
    return cv
