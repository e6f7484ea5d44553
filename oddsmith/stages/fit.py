"""The fit stage of one candidate: cross-validate on the shared folds, then refit on the
whole training part. A candidate that cannot be fitted is recorded as failed, with the
reason, and the build goes on with the others."""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from oddsmith import metrics
from oddsmith.errors import FitError
from oddsmith.io import read_parquet, sha256_file, write_json, write_parquet
from oddsmith.models import PENALISED_KINDS, fit_candidate
from oddsmith.recipe import apply_recipe, design_columns, load_recipe
from oddsmith.split import fold_columns

log = logging.getLogger("oddsmith.fit")
OPTION_KEYS = ("grid", "inner_folds", "l1_ratio", "max_iter")


def training_design(*, data_path: str, assignment_path: str, recipe_path: str, candidate: dict, target: str):
    """Design matrix, outcome, ids and fold columns of the training part for one candidate."""
    df = read_parquet(data_path)
    assignment = read_parquet(assignment_path)
    train = (assignment["part"] == "train").to_numpy()
    recipe = load_recipe(recipe_path)
    standardise = candidate["kind"] in PENALISED_KINDS
    X, _ = apply_recipe(recipe, df.loc[train], standardise=standardise)
    X = X[design_columns(recipe, candidate.get("features"))] if candidate["kind"] != "baseline" else X.iloc[:, :0]
    folds = assignment.loc[train, [c for c in assignment.columns if c.startswith("fold")]]
    return X.reset_index(drop=True), df.loc[train, target].to_numpy().astype(int), assignment.loc[train, "id"], folds, recipe


def _options(candidate: dict) -> dict:
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


def cross_validate(X: pd.DataFrame, y: np.ndarray, folds: pd.DataFrame, *, kind: str, options: dict, seed: int):
    """Out-of-fold predictions (one column per repeat) and per-fold metrics."""
    oof, per_fold = {}, []
    for repeat, column in enumerate(fold_columns(folds.shape[1]), start=1):
        fold = folds[column].to_numpy()
        p = np.full(len(y), np.nan)
        for k in np.unique(fold):
            valid = fold == k
            model = fit_candidate(X.loc[~valid], y[~valid], kind=kind, options=options, seed=seed + k)
            p[valid] = model.predict(X.loc[valid])
            row = {"repeat": repeat, "fold": int(k), "n_train": int((~valid).sum())} | metrics.summarise(y[valid], p[valid])
            if model.penalty:
                row["chosen_C"] = model.penalty.get("C")
            per_fold.append(row)
            log.info("repeat %d fold %d: log loss %.4f, AUC %s", repeat, k, row["log_loss"], row["auc"])
        oof["p" if repeat == 1 else f"p_r{repeat}"] = p
    return oof, per_fold


def run_fit(*, data_path: str, assignment_path: str, recipe_path: str, candidate: dict, target: str, seed: int,
            out_model: str, out_cv: str, out_oof: str) -> dict:
    """Cross-validate and refit one candidate; write model JSON, CV results and OOF predictions."""
    X, y, ids, folds, recipe = training_design(data_path=data_path, assignment_path=assignment_path,
                                               recipe_path=recipe_path, candidate=candidate, target=target)
    kind, options = candidate["kind"], _options(candidate)
    header = {"candidate": candidate["name"], "kind": kind, "settings": candidate, "n_parameters": X.shape[1] + 1,
              "recipe_sha256": sha256_file(recipe_path), "design_columns": list(X.columns)}
    log.info("candidate %s (%s): %d rows, %d design columns", candidate["name"], kind, len(y), X.shape[1])
    try:
        oof, per_fold = cross_validate(X, y, folds, kind=kind, options=options, seed=seed)
        final = fit_candidate(X, y, kind=kind, options=options, seed=seed)
    except FitError as exc:
        log.warning("candidate %s failed: %s", candidate["name"], exc)
        failed = header | {"status": "failed", "reason": str(exc)}
        write_parquet(out_oof, pd.DataFrame({"id": ids.to_numpy(), "y": y, "p": np.nan}))
        write_json(out_model, failed)
        write_json(out_cv, failed | {"folds": [], "pooled": None})
        return failed
    model = final.to_dict() | header | {
        "status": "ok", "standardise": kind in PENALISED_KINDS, "coef_table": final.coef_table, "warnings": final.warnings,
    }
    pooled = metrics.summarise(y, oof["p"])
    write_parquet(out_oof, pd.DataFrame({"id": ids.to_numpy(), "y": y, **oof}))
    write_json(out_model, model)
    write_json(out_cv, header | {"status": "ok", "folds": per_fold, "pooled": pooled, "warnings": final.warnings})
    log.info("candidate %s done: pooled out-of-fold log loss %.4f", candidate["name"], pooled["log_loss"])
    return model
