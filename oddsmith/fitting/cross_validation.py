"""Cross-validation of one candidate on the shared folds: out-of-fold predictions and per-fold
metrics, every fold fitted on a row index into one design array (never a copy)."""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from oddsmith.assessment import metrics
from oddsmith.data.split import fold_columns
from oddsmith.fitting import solvers
from oddsmith.fitting.models import fit_design, inverse_link

# The fit stage's logger: these lines belong to the fit job's log.
log = logging.getLogger("oddsmith.fit")


def cross_validate(values: np.ndarray, names: list[str], y: np.ndarray, folds: pd.DataFrame, *, kind: str,
                   options: dict, seed: int):
    """Out-of-fold predictions (one column per repeat) and per-fold metrics.

    ``folds`` holds one fold column per repeat (``fold``, ``fold_r2``, ...); fold ``k`` of a
    repeat is fitted on the other folds' rows with seed ``seed + k`` and predicts its own.

    Returns
    -------
    oof : dict
        ``{"p": array, "p_r2": array, ...}``: each row's prediction by the model that left it out.
    per_fold : list of dict
        ``repeat``, ``fold``, ``n_train``, :func:`oddsmith.assessment.metrics.summarise` of the
        fold's rows, and ``chosen_C`` for penalised kinds.
    """
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
