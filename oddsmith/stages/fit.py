"""The fit stage of one candidate: cross-validate on the shared folds, then refit on the
whole training part. A candidate that cannot be fitted is recorded as failed, with the
reason, and the build goes on with the others."""

from __future__ import annotations

import logging
import math

import numpy as np
import pandas as pd

from oddsmith import metrics, solvers
from oddsmith.errors import ArtifactError, FitError
from oddsmith.io import read_parquet, read_parquet_matrix, sha256_file, write_json, write_parquet
from oddsmith.models import PENALISED_KINDS, fit_design, inverse_link
from oddsmith.recipe import CLUSTER_LABELS, design_columns, load_recipe
from oddsmith.split import fold_columns

log = logging.getLogger("oddsmith.fit")
OPTION_KEYS = ("grid", "inner_folds", "l1_ratio", "max_iter")


def training_design(*, design_path: str, assignment_path: str, recipe_path: str, candidate: dict, id_column: str,
                    target: str):
    """The candidate's training design as one C-ordered float64 array, plus names, outcome, ids, folds, recipe.

    The array is the only copy of the design the job holds: folds are row index arrays into
    it, never copies. Penalised kinds get the recipe's standardisation, applied in place.
    """
    recipe = load_recipe(recipe_path)
    names = [] if candidate["kind"] == "baseline" else design_columns(recipe, candidate.get("features"))
    values = read_parquet_matrix(design_path, names)
    if candidate["kind"] in PENALISED_KINDS:
        values -= np.array([recipe["means"][c] for c in names], dtype=np.float64)
        values /= np.array([recipe["sds"][c] for c in names], dtype=np.float64)
    head = read_parquet(design_path, columns=[id_column, target])
    assignment = read_parquet(assignment_path)
    train = assignment.loc[(assignment["part"] == "train").to_numpy()].reset_index(drop=True)
    del assignment
    # Compared as Arrow strings: no Python object per id.
    if not _as_arrow_text(train["id"]).equals(_as_arrow_text(head[id_column])):
        raise ArtifactError(f"{design_path} and {assignment_path} disagree on the training rows; "
                            "rebuild the features stage")
    folds = train[[c for c in train.columns if c.startswith("fold")]]
    return values, names, head[target].to_numpy().astype(int), train["id"], folds, recipe


def _as_arrow_text(ids: pd.Series):
    import pyarrow as pa

    return pa.chunked_array([pa.Array.from_pandas(ids)]).cast(pa.string()).combine_chunks()


def fit_options(candidate: dict) -> dict:
    """The options of ``fit_design`` that apply to the candidate's kind."""
    options = {k: candidate[k] for k in OPTION_KEYS if k in candidate}
    if candidate["kind"] not in PENALISED_KINDS:
        options = {k: v for k, v in options.items() if k == "max_iter"}
    if candidate["kind"] == "l1":
        options.pop("l1_ratio", None)
    if candidate["kind"] == "baseline":
        options = {}
    if candidate["kind"] != "elastic_net":
        options.pop("l1_ratio", None)
    return options


def cross_validate(values: np.ndarray, names: list[str], y: np.ndarray, folds: pd.DataFrame, *, kind: str,
                   options: dict, seed: int):
    """Out-of-fold predictions (one column per repeat) and per-fold metrics."""
    oof, per_fold = {}, []
    for repeat, column in enumerate(fold_columns(folds.shape[1]), start=1):
        fold = folds[column].to_numpy()
        p = np.full(len(y), np.nan)
        for k in np.unique(fold):
            valid = fold == k
            fit_rows, valid_rows = np.flatnonzero(~valid), np.flatnonzero(valid)
            model = fit_design(values, names, y, rows=fit_rows, kind=kind, options=options, seed=seed + k)
            coef = np.r_[model.intercept, [model.coefficients[n] for n in names]]
            p[valid] = inverse_link(model.link, solvers.linear_predictor(values, valid_rows, coef))
            row = {"repeat": repeat, "fold": int(k), "n_train": int(fit_rows.size)} | metrics.summarise(y[valid], p[valid])
            if model.penalty:
                row["chosen_C"] = model.penalty.get("C")
            per_fold.append(row)
            log.info("repeat %d fold %d: log loss %.4f, AUC %s", repeat, k, row["log_loss"], row["auc"])
        oof["p" if repeat == 1 else f"p_r{repeat}"] = p
    return oof, per_fold


def original_scale(intercept: float, coefficients: dict, names: list[str], recipe: dict) -> dict:
    """A standardised fit's coefficients per unit of each design column, as the recipe makes it.

    With z = (x - mean) / sd: b_z z = (b_z / sd) x - b_z mean / sd, so each coefficient is
    divided by its column's training SD and the intercept absorbs the means. The predictions
    are the same; only the unit changes.

    Examples
    --------
    >>> recipe = {"means": {"x": 10.0}, "sds": {"x": 2.0}}
    >>> original_scale(0.5, {"x": 1.0}, ["x"], recipe)["coefficients"]
    {'x': 0.5}
    """
    per_unit = {c: float(coefficients[c]) / float(recipe["sds"][c]) for c in names}
    shift = math.fsum(per_unit[c] * float(recipe["means"][c]) for c in names)
    return {"intercept": float(intercept) - shift, "coefficients": per_unit,
            "basis": "standardised coefficient divided by the training SD of its design column; intercept "
                     "adjusted by the training means (features/recipe.json)"}


def model_document(final, header: dict, *, names: list[str], recipe: dict) -> dict:
    """The model JSON of a successful fit: the fit, the header, and for penalised kinds the
    coefficients on the original scale."""
    kind = header["kind"]
    model = final.to_dict() | header | {
        "status": "ok", "standardise": kind in PENALISED_KINDS, "coef_table": final.coef_table, "warnings": final.warnings,
    }
    if kind in PENALISED_KINDS:
        model["original_scale"] = original_scale(final.intercept, final.coefficients, names, recipe)
    return model


def cluster_labels(design_path: str, inference: dict | None):
    """The cluster label of every training row (features stage), or None unless clustering."""
    if (inference or {}).get("standard_errors") != "cluster":
        return None
    return read_parquet(design_path, columns=[CLUSTER_LABELS])[CLUSTER_LABELS].to_numpy()


def run_fit(*, design_path: str, assignment_path: str, recipe_path: str, candidate: dict, id_column: str,
            target: str, seed: int, out_model: str, out_cv: str, out_oof: str, inference: dict | None = None) -> dict:
    """Cross-validate and refit one candidate; write model JSON, CV results and OOF predictions.

    ``inference`` (the config section) sets how the final fit's standard errors are
    estimated; the fold fits need only their coefficients, so they skip that work.
    """
    values, names, y, ids, folds, recipe = training_design(
        design_path=design_path, assignment_path=assignment_path, recipe_path=recipe_path, candidate=candidate,
        id_column=id_column, target=target)
    kind, options = candidate["kind"], fit_options(candidate)
    clusters = None if kind in PENALISED_KINDS else cluster_labels(design_path, inference)
    header = {"candidate": candidate["name"], "kind": kind, "settings": candidate, "n_parameters": len(names) + 1,
              "recipe_sha256": sha256_file(recipe_path), "design_columns": list(names)}
    log.info("candidate %s (%s): %d rows, %d design columns", candidate["name"], kind, len(y), len(names))
    try:
        oof, per_fold = cross_validate(values, names, y, folds, kind=kind, options=options, seed=seed)
        final = fit_design(values, names, y, kind=kind, options=options, seed=seed,
                           inference=None if kind in PENALISED_KINDS else inference, clusters=clusters)
    except FitError as exc:
        log.warning("candidate %s failed: %s", candidate["name"], exc)
        failed = header | {"status": "failed", "reason": str(exc)}
        write_parquet(out_oof, pd.DataFrame({"id": ids, "y": y, "p": np.nan}))
        write_json(out_model, failed)
        write_json(out_cv, failed | {"folds": [], "pooled": None})
        return failed
    model = model_document(final, header, names=names, recipe=recipe)
    pooled = metrics.summarise(y, oof["p"])
    write_parquet(out_oof, pd.DataFrame({"id": ids, "y": y, **oof}))
    write_json(out_model, model)
    write_json(out_cv, header | {"status": "ok", "folds": per_fold, "pooled": pooled, "warnings": final.warnings})
    log.info("candidate %s done: pooled out-of-fold log loss %.4f", candidate["name"], pooled["log_loss"])
    return model
