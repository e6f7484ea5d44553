"""The fit stage of one candidate: cross-validate on the shared folds, then refit on the
whole training part. A candidate that cannot be fitted is recorded as failed, with the
reason, and the build goes on with the others."""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from oddsmith.assessment import metrics
from oddsmith.data.recipe import CLUSTER_LABELS, design_columns, load_recipe
from oddsmith.errors import ArtifactError, FitError
from oddsmith.fitting.cross_validation import cross_validate
from oddsmith.fitting.models import PENALISED_KINDS, fit_design, original_scale
from oddsmith.io import read_parquet, read_parquet_matrix, sha256_file, write_json, write_parquet

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
