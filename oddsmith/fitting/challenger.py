"""A flexible challenger on the candidates' own folds: how much the interpretable models leave
on the table.

Gradient-boosted trees (scikit-learn's ``HistGradientBoostingClassifier``) are fitted on
exactly the shared cross-validation folds of the training part, on the full training design
the features stage writes. The challenger is never a candidate for adoption and is never
stored as a model: only its out-of-fold predictions, per-fold metrics, settings and library
version are written. Its gap to the selected candidate is the mean paired fold difference,
with an interval from the corrected resampled t-test's standard error (Nadeau & Bengio 2003,
:func:`oddsmith.fitting.selection.paired_difference`).
"""

from __future__ import annotations

import logging
from contextlib import contextmanager

import numpy as np
import pandas as pd

from oddsmith.assessment import metrics
from oddsmith.data.split import fold_columns
from oddsmith.errors import ArtifactError, OddsmithError
from oddsmith.fitting.selection import comparison_row, paired_difference

log = logging.getLogger("oddsmith.challenger")

NAME = "challenger"
KIND = "gradient_boosted_trees"
LABEL = "challenger — not for adoption"
#: Interval level of the gap.
LEVEL = 0.95
#: A log-loss gap whose interval excludes 0 and that is larger than this share of the
#: selected candidate's cross-validated log loss raises a caveat (a project choice).
RELATIVE_GAP_LIMIT = 0.02
#: Which direction of each metric is better: the gap is always "challenger better by".
BETTER = {"log_loss": "lower", "auc": "higher"}


def estimator_settings(settings: dict) -> dict:
    """The estimator's keyword arguments from the config's ``challenger`` section.

    Early stopping is off so that every fold runs exactly ``max_iter`` iterations on its own
    training rows (with it on, a validation slice would be cut from them at random).

    Examples
    --------
    >>> estimator_settings({"enabled": True, "max_iter": 50, "learning_rate": 0.1, "max_leaf_nodes": 15, "seed": 3})
    {'max_iter': 50, 'learning_rate': 0.1, 'max_leaf_nodes': 15, 'early_stopping': False, 'random_state': 3}
    """
    return {"max_iter": int(settings["max_iter"]), "learning_rate": float(settings["learning_rate"]),
            "max_leaf_nodes": int(settings["max_leaf_nodes"]), "early_stopping": False,
            "random_state": int(settings["seed"])}


#: Rows moved per step when the training rows are gathered to the front of the design.
ROW_BLOCK = 32_768


@contextmanager
def training_rows_first(values: np.ndarray, valid: np.ndarray):
    """Lend ``values[~valid]`` as a view, without a second copy of the training rows.

    The training rows are moved, in their order, to the front of ``values`` (C-ordered, in
    place, ``ROW_BLOCK`` rows at a time) and the validation rows are set aside; the view
    ``values[:n_train]`` then holds exactly the bytes of ``values[~valid]``. On leaving, every
    row goes back where it was, so ``values`` is as before (also when the body raised).
    Saves the one copy a fit on a fold would take (80% of the design with five folds); the
    trees bin their own copy as ``uint8`` anyway.

    Yields
    ------
    tuple of numpy.ndarray
        The training rows (a view into ``values``) and the validation rows (a copy).

    Examples
    --------
    >>> x = np.arange(12.0).reshape(6, 2); before = x.copy()
    >>> valid = np.array([False, True, False, False, True, False])
    >>> with training_rows_first(x, valid) as (train, held_out):
    ...     train.tolist() == before[~valid].tolist(), held_out.tolist() == before[valid].tolist()
    (True, True)
    >>> bool((x == before).all())
    True
    """
    train = np.flatnonzero(~valid)
    held_out = values[valid]
    n_train = len(train)
    # train[i] >= i: each block's sources lie at or after its destination and after every
    # earlier block's, so moving forward in order never overwrites a row still to be moved.
    blocks = [(start, min(start + ROW_BLOCK, n_train)) for start in range(0, n_train, ROW_BLOCK)]
    for start, stop in blocks:
        values[start:stop] = values[train[start:stop]]
    try:
        yield values[:n_train], held_out
    finally:
        # The same moves undone from the last block back: a block's destinations lie at or
        # after its sources, beyond every block still to be undone.
        for start, stop in reversed(blocks):
            values[train[start:stop]] = values[start:stop].copy()
        values[valid] = held_out


def cross_validate_trees(values: np.ndarray, y: np.ndarray, folds: pd.DataFrame, *, settings: dict,
                         threads: int = 1) -> tuple[dict, list[dict]]:
    """Out-of-fold predictions (one column per repeat) and per-fold metrics of the trees.

    Same layout as a candidate's (:func:`oddsmith.fitting.cross_validation.cross_validate`): the fold
    records carry ``repeat``, ``fold``, ``n_train`` and :func:`oddsmith.assessment.metrics.summarise`, so
    paired fold differences against any candidate line up by ``(repeat, fold)``.
    ``threads`` caps the OpenMP pool the trees use. ``values`` (C-ordered) is rearranged while
    a fold is fitted and restored after it (:func:`training_rows_first`).
    """
    from sklearn.ensemble import HistGradientBoostingClassifier
    from threadpoolctl import threadpool_limits

    kwargs = estimator_settings(settings)
    oof, per_fold = {}, []
    with threadpool_limits(limits=int(threads), user_api="openmp"):
        for repeat, column in enumerate(fold_columns(folds.shape[1]), start=1):
            fold = folds[column].to_numpy()
            p = np.full(len(y), np.nan)
            for k in np.unique(fold):
                valid = fold == k
                with training_rows_first(values, valid) as (train_rows, valid_rows):
                    model = HistGradientBoostingClassifier(**kwargs).fit(train_rows, y[~valid])
                p[valid] = model.predict_proba(valid_rows)[:, 1]
                row = {"repeat": repeat, "fold": int(k), "n_train": int((~valid).sum())}
                per_fold.append(row | metrics.summarise(y[valid], p[valid]))
                log.info("repeat %d fold %d: log loss %.4f", repeat, k, per_fold[-1]["log_loss"])
            oof["p" if repeat == 1 else f"p_r{repeat}"] = p
    return oof, per_fold


def gap_interval(cv_selected: dict, cv_challenger: dict, metric: str, *, level: float = LEVEL) -> dict:
    """How much better the challenger is than the selected candidate on ``metric``, with an interval.

    The advantage is the mean over shared folds of (selected − challenger) for a metric where
    lower is better, (challenger − selected) where higher is better; positive means the
    challenger does better. The interval is advantage ± t(k − 1, (1 + level)/2) · SE, with SE
    the corrected resampled standard error of the fold differences (Nadeau & Bengio 2003).
    ``relative`` is the advantage as a share of the selected candidate's mean fold value.

    Examples
    --------
    >>> sel = {"folds": [{"repeat": 1, "fold": k, "n": 10, "n_train": 40, "log_loss": v}
    ...                  for k, v in enumerate([0.50, 0.52, 0.48])]}
    >>> ch = {"folds": [{"repeat": 1, "fold": k, "n": 10, "n_train": 40, "log_loss": v}
    ...                 for k, v in enumerate([0.49, 0.50, 0.47])]}
    >>> round(gap_interval(sel, ch, "log_loss")["advantage"], 6)
    0.013333
    """
    from scipy.special import stdtrit  # stdtrit(df, q) is scipy.stats.t.ppf(q, df)

    sign = 1.0 if BETTER[metric] == "lower" else -1.0
    paired = paired_difference(cv_selected, cv_challenger, metric)
    advantage = sign * paired["mean"]
    half = float(stdtrit(paired["df"], (1.0 + level) / 2.0)) * paired["standard_error"]
    base = np.array([f[metric] for f in cv_selected["folds"] if f.get(metric) is not None], dtype=float)
    return {"metric": metric, "better": BETTER[metric], "advantage": advantage, "lower": advantage - half,
            "upper": advantage + half, "level": level, "standard_error": paired["standard_error"],
            "df": paired["df"], "t": None if paired["t"] is None else sign * paired["t"],
            "p_value": paired["p_value"], "selected_mean": float(base.mean()),
            "relative": advantage / float(base.mean()) if base.mean() != 0 else None}


def large_gap(log_loss_gap: dict, *, limit: float = RELATIVE_GAP_LIMIT) -> bool:
    """Whether the log-loss gap's interval lies above 0 and the gap exceeds ``limit`` of the selected log loss.

    Examples
    --------
    >>> large_gap({"lower": 0.004, "relative": 0.03}), large_gap({"lower": -0.001, "relative": 0.05})
    (True, False)
    """
    return log_loss_gap["lower"] > 0.0 and (log_loss_gap["relative"] or 0.0) > limit


def _guarded_gap(cv_selected: dict, cv_challenger: dict, metric: str) -> dict:
    # A metric undefined on most folds (AUC on single-class folds) leaves no gap to state.
    try:
        return gap_interval(cv_selected, cv_challenger, metric)
    except OddsmithError as exc:
        return {"metric": metric, "better": BETTER[metric], "advantage": None, "note": str(exc)}


def fold_record(values: np.ndarray, names: list, y: np.ndarray, folds: pd.DataFrame, *, settings: dict,
                threads: int = 1) -> tuple[dict, dict]:
    """The challenger's record (settings, fold metrics, pooled metrics, comparison row) and its
    out-of-fold predictions (one column per repeat), from :func:`cross_validate_trees`."""
    import sklearn

    oof, per_fold = cross_validate_trees(values, y, folds, settings=settings, threads=threads)
    record = {"candidate": NAME, "kind": KIND, "label": LABEL, "status": "ok", "adoptable": False,
              "estimator": "sklearn.ensemble.HistGradientBoostingClassifier", "library": "scikit-learn",
              "library_version": sklearn.__version__, "settings": estimator_settings(settings),
              "design_columns": list(names), "n_parameters": None, "folds": per_fold,
              "pooled": metrics.summarise(y, oof["p"])}
    # The same summary row the comparison table holds for a candidate, so the card only formats.
    record["row"] = comparison_row(record)
    return record, oof


def with_gap(record: dict, selected: dict, *, where: str = "the challenger's record") -> dict:
    """``record`` (:func:`fold_record`) with its gap to ``selected`` (that candidate's cv record):
    log loss and AUC, each as :func:`gap_interval`, and whether the log-loss gap is large."""
    if record.get("candidate") != NAME or not record.get("folds"):
        raise ArtifactError(f"{where} is not the challenger's fold record",
                            [f"expected candidate {NAME!r} with fold metrics, found candidate "
                             f"{record.get('candidate')!r} with {len(record.get('folds') or [])} fold(s)"])
    gaps = {metric: _guarded_gap(selected, record, metric) for metric in BETTER}
    record = dict(record)
    record["gap"] = {"selected": selected["candidate"], **gaps, "relative_limit": RELATIVE_GAP_LIMIT,
                     "large": gaps["log_loss"].get("advantage") is not None and large_gap(gaps["log_loss"])}
    return record
