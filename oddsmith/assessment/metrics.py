"""Discrimination, calibration and model-comparison measures for yes/no predictions.

Every function takes plain arrays: ``y`` holds outcomes coded 0/1 and ``p`` the predicted
probability of outcome 1. Returned dictionaries hold only Python ``float``, ``int``, ``str``,
``bool``, ``list``, ``dict`` and ``None``, so they can be written to JSON as they are.
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from oddsmith.assessment.ranks import midranks
from oddsmith.errors import ArgumentError, OddsmithError, check_workers

# Nothing here imports scikit-learn, statsmodels or scipy.stats: importing them costs a job
# 1-2 s, more than the whole computation of the decision stages and a tenth of a fit job's
# work at 1M rows. The measures are computed with numpy, and the distribution functions come
# from scipy.special (the functions scipy.stats evaluates, so the values are the same bits;
# tests/test_metrics.py compares both with the libraries).

# Probabilities are clipped to this distance from 0 and 1 before taking logits, so that a
# prediction of exactly 0 or 1 gives a large finite logit. The size is common practice.
_EPS = 1e-15


# ---------------------------------------------------------------------------------------------
# input checks


def outcomes_and_probabilities(y, p) -> tuple[np.ndarray, np.ndarray]:
    """Return ``y`` as an int array of 0/1 and ``p`` as a float array in [0, 1].

    The one check of outcomes and predicted probabilities that the metrics, the cut-off
    (:mod:`oddsmith.assessment.threshold`) and the subgroup measures (:mod:`oddsmith.assessment.fairness`) apply.

    Raises
    ------
    OddsmithError
        Naming the first offending value and its row.
    """
    y_arr = np.asarray(y)
    p_arr = np.asarray(p, dtype=float)
    if y_arr.ndim != 1 or p_arr.ndim != 1:
        raise OddsmithError(
            f"y and p must be one-dimensional, got shapes {y_arr.shape} and {p_arr.shape}"
        )
    if y_arr.shape[0] != p_arr.shape[0]:
        raise OddsmithError(
            f"y and p must have the same length, got {y_arr.shape[0]} and {p_arr.shape[0]}"
        )
    if y_arr.shape[0] == 0:
        raise OddsmithError("y and p are empty; at least one row is needed")
    if y_arr.dtype.kind in "biuf":  # numbers: two comparisons, several times faster than isin
        bad_y = (y_arr != 0) & (y_arr != 1)
    else:
        bad_y = ~np.isin(y_arr, (0, 1))
    if bad_y.any():
        row = int(np.flatnonzero(bad_y)[0])
        raise OddsmithError(
            f"y must contain only 0 and 1, found {y_arr[row].item()!r} at row {row}"
        )
    bad_p = ~(np.isfinite(p_arr) & (p_arr >= 0.0) & (p_arr <= 1.0))
    if bad_p.any():
        row = int(np.flatnonzero(bad_p)[0])
        raise OddsmithError(
            f"p must be a probability within [0, 1], found {p_arr[row].item()!r} at row {row}"
        )
    return y_arr.astype(np.int64), p_arr


def _require_both_classes(y: np.ndarray, what: str) -> None:
    events = int(y.sum())
    if events == 0 or events == y.shape[0]:
        only = "1" if events else "0"
        raise OddsmithError(f"{what} is undefined: every outcome is {only} ({y.shape[0]} rows)")


def _logit(p: np.ndarray) -> np.ndarray:
    clipped = np.clip(p, _EPS, 1.0 - _EPS)
    return np.log(clipped) - np.log1p(-clipped)


# ---------------------------------------------------------------------------------------------
# discrimination and accuracy


def roc_corners(y: np.ndarray, p: np.ndarray, order: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Cumulative true and false positives at each distinct score, from the highest score down.

    These are the corners of the ROC curve without the origin (the last is ``(events,
    non-events)``). ``y`` and ``p`` must already be checked (:func:`outcomes_and_probabilities`);
    ``order`` is a stable ascending argsort of ``p`` when the caller has one (any sort that
    keeps equal scores together gives the same corners).
    """
    if order is None:
        order = np.argsort(p, kind="stable")
    descending = order[::-1]
    p_desc = p[descending]
    ends = np.append(np.flatnonzero(p_desc[1:] != p_desc[:-1]), p_desc.shape[0] - 1)
    true_positives = np.cumsum(y[descending])[ends]
    return true_positives, ends + 1 - true_positives


def _auc_from_corners(true_positives: np.ndarray, false_positives: np.ndarray) -> float:
    # Twice the area under the step-and-trapezoid curve in counts is a whole number, so it is
    # summed exactly in integers and divided once (Python's int division rounds correctly).
    tp = np.concatenate(([0], true_positives)).astype(np.int64)
    fp = np.concatenate(([0], false_positives)).astype(np.int64)
    twice_area = int(np.sum(np.diff(fp) * (tp[1:] + tp[:-1])))
    return twice_area / (2 * int(tp[-1]) * int(fp[-1]))


def _ks_from_corners(true_positives: np.ndarray, false_positives: np.ndarray) -> float:
    return float(max(0.0, np.max(true_positives / true_positives[-1] - false_positives / false_positives[-1])))


def auc(y, p) -> float:
    """Area under the ROC curve (ties between a positive and a negative count one half).

    Computed from one sort of ``p`` (the ROC curve's corners, trapezoids between them); the
    tests check it against scikit-learn's ``roc_auc_score`` and a count over all pairs.

    Examples
    --------
    >>> auc([0, 0, 1, 1], [0.1, 0.4, 0.35, 0.8])
    0.75
    """
    y, p = outcomes_and_probabilities(y, p)
    _require_both_classes(y, "AUC")
    return _auc_from_corners(*roc_corners(y, p))


def gini(y, p) -> float:
    """Gini coefficient (accuracy ratio), ``2 * AUC - 1``."""
    return 2.0 * auc(y, p) - 1.0


def ks(y, p) -> float:
    """Kolmogorov–Smirnov statistic, the largest ``TPR - FPR`` over all cut-offs.

    Cut-offs include "flag none", so the value is never below 0. When the score ranks
    positives above negatives it equals the two-sample KS distance between the score
    distributions of the two classes.
    """
    y, p = outcomes_and_probabilities(y, p)
    _require_both_classes(y, "KS")
    return _ks_from_corners(*roc_corners(y, p))


def _log_loss(y: np.ndarray, p: np.ndarray) -> float:
    clipped = np.clip(p, _EPS, 1.0 - _EPS)
    return float(np.mean(-np.where(y == 1, np.log(clipped), np.log(1.0 - clipped))))


def log_loss(y, p) -> float:
    """Mean negative log-likelihood of the outcomes under ``p`` (natural log; ``p`` clipped to
    ``[1e-15, 1 - 1e-15]``). The tests check it against scikit-learn's ``log_loss``."""
    y, p = outcomes_and_probabilities(y, p)
    return _log_loss(y, p)


def brier(y, p) -> float:
    """Brier score, the mean of ``(p - y) ** 2``."""
    y, p = outcomes_and_probabilities(y, p)
    return float(np.mean((y - p) ** 2))


# ---------------------------------------------------------------------------------------------
# calibration


def _calibration_slope_fit(y: np.ndarray, lp: np.ndarray) -> float:
    """Slope b of ``logit P(y=1) = a + b·lp`` by maximum likelihood (row-blocked Newton)."""
    from oddsmith.fitting import solvers

    rate = float(np.clip(y.mean(), 1e-12, 1 - 1e-12))
    start = np.array([math.log(rate) - math.log1p(-rate), 0.0])
    fit = solvers.newton_ml("logit", np.ascontiguousarray(lp[:, None]), y.astype(float), None, start,
                            max_iter=100)
    if not fit["converged"]:
        raise OddsmithError(f"calibration fit failed: {'; '.join(fit['trouble'])}")
    return float(fit["params"][1])


def _calibration_in_the_large(y: np.ndarray, lp: np.ndarray) -> float:
    """Constant a of ``logit P(y=1) = a + lp`` (offset lp): the root of sum(y - expit(a + lp)).

    The score is strictly decreasing in a, so Newton's method with step halving on |score|
    converges from a = 0.
    """
    from scipy.special import expit

    def score(a: float) -> tuple[float, float]:
        q = expit(a + lp)
        return float(np.sum(y - q)), float(np.sum(q * (1.0 - q)))

    a, (g, h) = 0.0, score(0.0)
    for _ in range(200):
        if h <= 0.0:
            break
        step = g / h
        trial, (g_t, h_t) = a + step, score(a + step)
        while abs(g_t) > abs(g) and abs(step) > 1e-15:
            step /= 2.0
            trial, (g_t, h_t) = a + step, score(a + step)
        a, g, h = trial, g_t, h_t
        if abs(step) <= 1e-12 * max(1.0, abs(a)):
            return a
    raise OddsmithError("calibration fit failed: calibration-in-the-large did not converge")


def calibration_intercept_slope(y, p) -> dict:
    """Logistic recalibration intercept and slope.

    With ``lp = logit(p)`` (``p`` clipped to ``[1e-15, 1 - 1e-15]``):

    * ``slope`` is the coefficient of ``lp`` in the logistic regression ``logit P(y=1) = a + b·lp``
      (1 is ideal; below 1 means predictions are too extreme);
    * ``intercept`` is calibration-in-the-large: the constant ``a`` of the logistic regression
      ``logit P(y=1) = a + lp`` with ``lp`` as an offset, slope fixed at 1 (0 is ideal; above 0
      means risk is under-predicted on average).

    Returns
    -------
    dict
        ``intercept``, ``slope``.

    Raises
    ------
    OddsmithError
        If ``y`` has a single class, ``p`` has a single distinct value, or the fit separates.
    """
    y, p = outcomes_and_probabilities(y, p)
    _require_both_classes(y, "calibration")
    lp = _logit(p)
    if np.ptp(lp) == 0.0:
        raise OddsmithError(
            f"calibration slope is undefined: every prediction equals {float(p[0])!r}"
        )
    return {"intercept": _calibration_in_the_large(y, lp), "slope": _calibration_slope_fit(y, lp)}


def _tie_aware_boundaries(p_sorted: np.ndarray, groups: int) -> np.ndarray:
    """Boundaries ``[0, c_1, ..., n]`` of at most ``groups`` equal-count groups of sorted ``p``.

    Cut ``k`` starts at ``floor(n * k / groups)``; if the values just before and at the cut
    are equal, the cut moves up past the whole run of that value, so a tied value never
    straddles two groups. Cuts that coincide or fall at 0 or ``n`` are dropped.
    """
    n = p_sorted.shape[0]
    starts = np.array([n * k // groups for k in range(1, groups)], dtype=np.int64)
    starts = starts[starts > 0]
    # searchsorted(side="right") on the value just before the cut gives the end of its run
    moved = np.searchsorted(p_sorted, p_sorted[starts - 1], side="right")
    cuts = np.unique(moved[moved < n])
    return np.concatenate([[0], cuts, [n]])


def _check_group_count(value: int, name: str) -> None:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
        raise OddsmithError(f"{name} must be a positive integer, got {value!r}")


#: Expected counts below which the Hosmer–Lemeshow chi-squared approximation is not trusted:
#: no group's expected events or non-events below 1, and not most (more than half) of the
#: 2·g expected counts below 5. Common practice, after Hosmer & Lemeshow's guidance on
#: expected frequencies (Applied Logistic Regression); the exact thresholds are a project choice.
HL_MIN_EXPECTED = 1.0
HL_SMALL_EXPECTED = 5.0


def hosmer_lemeshow_sample_check(expected_events, n_per_group) -> dict:
    """Whether the groups hold enough expected events and non-events for the chi-squared p-value.

    The rule (common practice, after Hosmer & Lemeshow): every group's expected events
    ``E`` and expected non-events ``n − E`` at least 1, and at most half of these ``2·g``
    expected counts below 5.

    Examples
    --------
    >>> hosmer_lemeshow_sample_check([0.4, 1.2, 2.0], [5, 5, 5])["adequate"]
    False
    >>> hosmer_lemeshow_sample_check([6.0, 12.0, 20.0], [50, 50, 50])["adequate"]
    True
    """
    events = np.asarray(expected_events, dtype=float)
    cells = np.concatenate([events, np.asarray(n_per_group, dtype=float) - events])
    below_min, below_small = int((cells < HL_MIN_EXPECTED).sum()), int((cells < HL_SMALL_EXPECTED).sum())
    adequate = below_min == 0 and 2 * below_small <= cells.shape[0]
    rule = (f"every group's expected events and non-events at least {HL_MIN_EXPECTED:g}, and at most half of "
            f"them below {HL_SMALL_EXPECTED:g} (common practice, after Hosmer & Lemeshow)")
    note = None if adequate else (
        f"too few expected events or non-events per group for the chi-squared approximation: {below_min} of "
        f"{cells.shape[0]} expected counts below {HL_MIN_EXPECTED:g}, {below_small} below {HL_SMALL_EXPECTED:g}; "
        f"the rule is {rule}")
    return {"adequate": bool(adequate), "below_1": below_min, "below_5": below_small, "cells": int(cells.shape[0]),
            "rule": rule, "note": note}


def hosmer_lemeshow(y, p, *, groups: int = 10) -> dict:
    """Hosmer–Lemeshow goodness-of-fit test on groups of fitted risk.

    Grouping: rows are sorted by ``p`` (stable sort); cut ``k`` (``k = 1 .. groups - 1``) is
    placed before sorted position ``floor(n·k/groups)``; if that position holds the same ``p``
    as the one before it, the cut moves up to the first position with a larger ``p``, so tied
    predictions always share a group. Cuts that then coincide or reach ``n`` are dropped, so
    there may be fewer than ``groups`` groups.

    With ``g`` groups, ``O`` observed events, ``E`` the sum of ``p`` and ``n`` rows per group,
    ``C = Σ (O − E)² / (E·(1 − E/n))`` is compared to a chi-squared with ``g − 2`` degrees of
    freedom. ``p`` is clipped to ``[1e-15, 1 - 1e-15]`` so the denominator is never 0.

    Returns
    -------
    dict
        ``statistic``, ``df``, ``p_value`` (None when fewer than 3 groups remain), ``groups``:
        a list of ``{n, observed, expected, mean_p, p_min, p_max}``, and ``sample_check``
        (:func:`hosmer_lemeshow_sample_check`): when it is not ``adequate`` the p-value is
        kept but should not be read as a test.
    """
    y, p = outcomes_and_probabilities(y, p)
    _check_group_count(groups, "groups")
    return _hosmer_lemeshow(y, p, np.argsort(p, kind="stable"), groups)


def _hosmer_lemeshow(y: np.ndarray, p: np.ndarray, order: np.ndarray, groups: int) -> dict:
    from scipy.special import chdtrc  # the chi-squared survival function scipy.stats.chi2.sf evaluates

    p_raw, y_sorted = p[order], y[order]
    p_sorted = np.clip(p_raw, _EPS, 1.0 - _EPS)
    bounds = _tie_aware_boundaries(p_raw, groups)
    n_g = np.diff(bounds)
    observed = np.add.reduceat(y_sorted, bounds[:-1])
    expected = np.add.reduceat(p_sorted, bounds[:-1])
    statistic = float(np.sum((observed - expected) ** 2 / (expected * (1.0 - expected / n_g))))
    df = int(n_g.shape[0] - 2)
    p_value = float(chdtrc(df, statistic)) if df >= 1 else None
    table = [
        {
            "n": int(n_g[i]),
            "observed": int(observed[i]),
            "expected": float(expected[i]),
            "mean_p": float(expected[i] / n_g[i]),
            "p_min": float(p_raw[bounds[i]]),
            "p_max": float(p_raw[bounds[i + 1] - 1]),
        }
        for i in range(n_g.shape[0])
    ]
    return {"statistic": statistic, "df": df, "p_value": p_value, "groups": table,
            "sample_check": hosmer_lemeshow_sample_check(expected, n_g)}


def _wilson_bounds(events: int, n: int, *, level: float) -> tuple[float, float]:
    """The Wilson score bounds (Wilson 1927), clipped to [0, 1], computed with the operations of
    statsmodels' ``proportion_confint(method="wilson")`` in the same order, so the bounds are
    the same to the last bit (tests/test_metrics.py compares them). Written out because the
    decision stages would otherwise import statsmodels and scipy.stats for it, which costs
    more than their whole computation; the normal quantile comes from scipy.special, the
    function ``scipy.stats.norm.isf`` evaluates."""
    from scipy.special import ndtri

    crit = -ndtri((1.0 - level) / 2.0)
    count, nobs = np.int64(events), np.int64(n)
    q = count / nobs
    crit2 = crit**2
    denom = 1 + crit2 / nobs
    center = (q + crit2 / (2 * nobs)) / denom
    dist = crit * np.sqrt(q * (1.0 - q) / nobs + crit2 / (4.0 * nobs**2))
    dist /= denom
    return float(np.clip(center - dist, 0, 1)), float(np.clip(center + dist, 0, 1))


def _rate_interval(events: int, n: int, *, level: float = 0.95) -> tuple[float, float]:
    """Wilson score interval of ``events / n`` (95% unless ``level`` says otherwise), exact
    at the ends of [0, 1].

    The closed form leaves rounding residue where the interval touches 0 or 1 (a lower bound
    of 8.7e-19 with no events, an upper bound 1e-16 below 1 with only events); the bound is
    0 (1) exactly there, and the interval always contains the observed rate.
    """
    low, high = _wilson_bounds(events, n, level=level)
    rate = events / n
    low = 0.0 if events == 0 else min(max(low, 0.0), rate)
    high = 1.0 if events == n else max(min(high, 1.0), rate)
    return low, high


def reliability_bins(y, p, *, bins: int = 10) -> list[dict]:
    """Observed event rate against mean prediction in equal-count bins of ``p``.

    Bins follow the same tie-aware rule as :func:`hosmer_lemeshow` (tied predictions share a
    bin, so there may be fewer bins than asked). ``lower`` and ``upper`` are the smallest and
    largest prediction in the bin. ``ci_low``/``ci_high`` are the Wilson score 95% interval of
    the observed rate.

    Returns
    -------
    list of dict
        ``lower``, ``upper``, ``n``, ``events``, ``mean_predicted``, ``observed_rate``,
        ``ci_low``, ``ci_high``, in increasing order of ``p``.
    """
    y, p = outcomes_and_probabilities(y, p)
    _check_group_count(bins, "bins")
    order = np.argsort(p, kind="stable")
    p_sorted, y_sorted = p[order], y[order]
    bounds = _tie_aware_boundaries(p_sorted, bins)
    rows = []
    for start, stop in zip(bounds[:-1], bounds[1:]):
        n_bin = int(stop - start)
        events = int(y_sorted[start:stop].sum())
        ci_low, ci_high = _rate_interval(events, n_bin)
        rows.append(
            {
                "lower": float(p_sorted[start]),
                "upper": float(p_sorted[stop - 1]),
                "n": n_bin,
                "events": events,
                "mean_predicted": float(p_sorted[start:stop].mean()),
                "observed_rate": events / n_bin,
                "ci_low": float(ci_low),
                "ci_high": float(ci_high),
            }
        )
    return rows


# ---------------------------------------------------------------------------------------------
# DeLong variance and comparison of correlated AUCs


def _delong(y: np.ndarray, scores: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """AUCs and their DeLong covariance matrix for score rows ``scores`` (k × n).

    Uses midranks: with ``m`` positives and ``l`` negatives, the structural component of a
    positive is ``(rank among all − rank among positives) / l`` and of a negative
    ``1 − (rank among all − rank among negatives) / m``. Sorting dominates: O(k·n log n).
    """
    positives, negatives = scores[:, y == 1], scores[:, y == 0]
    m, l = positives.shape[1], negatives.shape[1]
    if m < 2 or l < 2:
        raise OddsmithError(
            f"DeLong variance needs at least 2 positives and 2 negatives, got {m} and {l}"
        )
    rank_pos = np.vstack([midranks(row) for row in positives])
    rank_neg = np.vstack([midranks(row) for row in negatives])
    rank_all = np.vstack([midranks(row) for row in np.hstack([positives, negatives])])
    aucs = (rank_all[:, :m].sum(axis=1) - m * (m + 1) / 2.0) / (m * l)
    v10 = (rank_all[:, :m] - rank_pos) / l
    v01 = 1.0 - (rank_all[:, m:] - rank_neg) / m
    covariance = np.atleast_2d(np.cov(v10)) / m + np.atleast_2d(np.cov(v01)) / l
    return aucs, covariance


def delong_auc_variance(y, p) -> float:
    """DeLong, DeLong & Clarke-Pearson (1988) variance of the empirical AUC."""
    y, p = outcomes_and_probabilities(y, p)
    _, covariance = _delong(y, p[np.newaxis, :])
    return float(covariance[0, 0])


def auc_confidence_interval(y, p, *, level: float = 0.95) -> dict:
    """Normal-approximation interval for the AUC using the DeLong standard error.

    The interval is ``AUC ± z·SE`` on the AUC scale (no transformation), clipped to [0, 1].

    Returns
    -------
    dict
        ``auc``, ``se``, ``level``, ``lower``, ``upper``.
    """
    from scipy.special import ndtri  # scipy.stats.norm.ppf

    if not (isinstance(level, float) and 0.0 < level < 1.0):
        raise OddsmithError(f"level must be a float strictly between 0 and 1, got {level!r}")
    y, p = outcomes_and_probabilities(y, p)
    aucs, covariance = _delong(y, p[np.newaxis, :])
    se = math.sqrt(covariance[0, 0])
    z = float(ndtri(0.5 + level / 2.0))
    value = float(aucs[0])
    return {
        "auc": value,
        "se": se,
        "level": level,
        "lower": max(0.0, value - z * se),
        "upper": min(1.0, value + z * se),
    }


def delong_test(y, p_a, p_b) -> dict:
    """DeLong test of equal AUC for two scores on the same rows.

    Returns
    -------
    dict
        ``auc_a``, ``auc_b``, ``difference`` (a − b), ``se``, ``z``, ``p_value`` (two-sided)
        and ``note``. When the difference has zero variance (e.g. identical rankings) ``z``
        and ``p_value`` are None and ``note`` says why; otherwise ``note`` is None.
    """
    from scipy.special import ndtr  # ndtr(-z) is scipy.stats.norm.sf(z)

    y, p_a = outcomes_and_probabilities(y, p_a)
    _, p_b = outcomes_and_probabilities(y, p_b)
    aucs, covariance = _delong(y, np.vstack([p_a, p_b]))
    contrast = np.array([1.0, -1.0])
    variance = float(contrast @ covariance @ contrast)
    difference = float(aucs[0] - aucs[1])
    result = {"auc_a": float(aucs[0]), "auc_b": float(aucs[1]), "difference": difference}
    if variance <= 0.0:
        note = "the AUC difference has zero variance (the two scores rank rows identically)"
        return result | {"se": 0.0, "z": None, "p_value": None, "note": note}
    se = math.sqrt(variance)
    z = difference / se
    p_value = float(2.0 * ndtr(-abs(z)))
    return result | {"se": se, "z": z, "p_value": p_value, "note": None}


# ---------------------------------------------------------------------------------------------
# comparison over resampled folds


def corrected_resampled_ttest(differences, *, n_train: int, n_test: int) -> dict:
    """Corrected resampled t-test of a mean difference over ``k`` train/test splits.

    Nadeau & Bengio (2003): the sample variance of the ``k`` differences is inflated by
    ``(1/k + n_test/n_train)`` instead of ``1/k`` to allow for overlapping training sets;
    ``t = mean / sqrt(factor · variance)`` on ``k − 1`` degrees of freedom.

    Returns
    -------
    dict
        ``mean``, ``t``, ``df``, ``p_value`` (two-sided), ``note``. When every difference is
        equal the variance is 0: ``t`` and ``p_value`` are None and ``note`` says why.
    """
    from scipy.special import stdtr  # stdtr(df, -t) is scipy.stats.t.sf(t, df)

    d = np.asarray(differences, dtype=float)
    if d.ndim != 1 or d.shape[0] < 2:
        raise OddsmithError(f"differences must be a 1-D sequence of at least 2, got {d.shape}")
    if not np.all(np.isfinite(d)):
        raise OddsmithError(f"differences must be finite, found {d[~np.isfinite(d)][0].item()!r}")
    for name, value in (("n_train", n_train), ("n_test", n_test)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
            raise OddsmithError(f"{name} must be a positive integer, got {value!r}")
    k = d.shape[0]
    mean = float(d.mean())
    variance = float(d.var(ddof=1))
    if variance == 0.0:
        note = f"all {k} differences equal {mean!r}; the t statistic is undefined"
        return {"mean": mean, "t": None, "df": k - 1, "p_value": None, "note": note}
    t = mean / math.sqrt((1.0 / k + n_test / n_train) * variance)
    p_value = float(2.0 * stdtr(k - 1, -abs(t)))
    return {"mean": mean, "t": t, "df": k - 1, "p_value": p_value, "note": None}


# ---------------------------------------------------------------------------------------------
# summary


def _guarded(compute, notes: list[str], label: str):
    try:
        return compute()
    except OddsmithError as exc:
        notes.append(f"{label}: {exc}")
        return None


def summarise(y, p) -> dict:
    """All headline measures for one set of predictions, safe on single-class folds.

    Measures that are undefined on these rows (AUC, Gini and KS with one class, calibration
    when the fit cannot be made) are None, and ``notes`` lists why.

    Returns
    -------
    dict
        ``n``, ``events``, ``auc``, ``gini``, ``ks``, ``log_loss``, ``brier``,
        ``calibration_intercept``, ``calibration_slope``, ``hl_statistic``, ``hl_p_value``,
        ``notes``.
    """
    y, p = outcomes_and_probabilities(y, p)
    notes: list[str] = []
    order = np.argsort(p, kind="stable")  # one sort serves AUC, KS and Hosmer–Lemeshow
    auc_value = ks_value = None
    try:
        _require_both_classes(y, "AUC")
    except OddsmithError as exc:
        notes.append(f"auc: {exc}")
    else:
        corners = roc_corners(y, p, order)
        auc_value, ks_value = _auc_from_corners(*corners), _ks_from_corners(*corners)
    calibration = _guarded(lambda: calibration_intercept_slope(y, p), notes, "calibration")
    hl = _hosmer_lemeshow(y, p, order, 10)
    if hl["p_value"] is None:
        notes.append(f"hosmer_lemeshow: only {hl['df'] + 2} groups of distinct risk; no p-value")
    return {
        "n": int(y.shape[0]),
        "events": int(y.sum()),
        "auc": auc_value,
        "gini": None if auc_value is None else 2.0 * auc_value - 1.0,
        "ks": ks_value,
        "log_loss": _log_loss(y, p),
        "brier": float(np.mean((y - p) ** 2)),
        "calibration_intercept": None if calibration is None else calibration["intercept"],
        "calibration_slope": None if calibration is None else calibration["slope"],
        "hl_statistic": hl["statistic"],
        "hl_p_value": hl["p_value"],
        "notes": notes,
    }


# ---------------------------------------------------------------------------------------------
# intervals: Wilson for proportions, a stratified percentile bootstrap for the rest

#: How every bootstrap replicate draws its rows (stated in every artifact that uses it).
BOOTSTRAP_RESAMPLING = ("rows drawn with replacement within each outcome class (stratified by outcome: every "
                        "replicate keeps the test part's numbers of events and non-events); replicate b draws "
                        "from numpy's default generator seeded with [seed, b], events first, then non-events")
PERCENTILE_METHOD = "percentile bootstrap (Efron & Tibshirani 1993, ch. 13)"
WILSON_METHOD = "Wilson score interval (Wilson 1927)"
#: Counts matrices are built this many cells (replicates × rows) at a time, bounding memory
#: to a few tens of MB whatever the size of the test part.
_CHUNK_CELLS = 2_000_000


def wilson_interval(events: int, n: int, *, level: float = 0.95) -> dict:
    """Wilson score interval of the proportion ``events / n``.

    Returns
    -------
    dict
        ``rate``, ``lower``, ``upper``, ``level``, ``method``; all None but ``level`` and
        ``method`` when ``n`` is 0 (the rate is undefined).

    Examples
    --------
    >>> out = wilson_interval(8, 10)
    >>> round(out["lower"], 4), round(out["upper"], 4)
    (0.4902, 0.9433)
    """
    _check_level(level)
    for name, value in (("events", events), ("n", n)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 0:
            raise OddsmithError(f"{name} must be a non-negative integer, got {value!r}")
    if events > n:
        raise OddsmithError(f"events must not exceed n, got {events} events in {n}")
    if n == 0:
        return {"rate": None, "lower": None, "upper": None, "level": level, "method": WILSON_METHOD}
    low, high = _rate_interval(int(events), int(n), level=level)
    return {"rate": events / n, "lower": low, "upper": high, "level": level, "method": WILSON_METHOD}


def _check_level(level) -> None:
    if not (isinstance(level, float) and 0.0 < level < 1.0):
        raise OddsmithError(f"level must be a float strictly between 0 and 1, got {level!r}")


def _check_bootstrap(replicates, seed) -> None:
    if isinstance(replicates, bool) or not isinstance(replicates, (int, np.integer)) or replicates < 1:
        raise OddsmithError(f"replicates must be a positive integer, got {replicates!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise OddsmithError(f"seed must be a non-negative integer, got {seed!r}")


def bootstrap_rows(y, *, replicate: int, seed: int) -> np.ndarray:
    """Row indices of bootstrap replicate ``replicate`` (see :data:`BOOTSTRAP_RESAMPLING`).

    The slow reference of every bootstrap here: a replicate's statistics equal those
    computed on ``y[rows], p[rows]``.
    """
    y = np.asarray(y)
    return draw_replicate(np.flatnonzero(y == 1), np.flatnonzero(y != 1), replicate=replicate, seed=seed)


def draw_replicate(events: np.ndarray, non_events: np.ndarray, *, replicate: int, seed: int) -> np.ndarray:
    """:func:`bootstrap_rows` from the row positions of the events and of the non-events."""
    drawn_events, drawn_non_events = draw_within_outcomes(events.size, non_events.size, replicate=replicate, seed=seed)
    return np.concatenate([events[drawn_events], non_events[drawn_non_events]])


def draw_within_outcomes(n_events: int, n_non_events: int, *, replicate: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Replicate ``replicate``'s draws as positions among the events and among the non-events:
    :func:`draw_replicate` is ``events[first]`` followed by ``non_events[second]``, from the
    same generator calls, so a caller that keeps per-outcome arrays gets the same replicate."""
    rng = np.random.default_rng([int(seed), int(replicate)])
    return rng.integers(0, n_events, n_events), rng.integers(0, n_non_events, n_non_events)


def bootstrap_blocks(n: int, replicates: int) -> list[tuple[int, int]]:
    """The blocks ``(first, last)`` of replicates whose counts are built at once: about
    :data:`_CHUNK_CELLS` cells (replicates × ``n`` rows) each, fixed by ``n`` alone."""
    block = max(1, _CHUNK_CELLS // max(n, 1))
    return [(first, min(replicates, first + block)) for first in range(0, replicates, block)]


def run_blocks(compute, blocks, *, workers: int = 1) -> None:
    """Call ``compute(first, last)`` for every block of replicates, on ``workers`` threads.

    Each replicate has its own generator and each block writes only its own replicates'
    results, so the results are the same bits for any ``workers``; BLAS runs on one thread
    meanwhile (threads and BLAS threads would contend for the same cores). numpy releases
    the GIL in the array work, so the threads share the cores.
    """
    from threadpoolctl import threadpool_limits

    check_workers(workers)
    with threadpool_limits(limits=1):
        if int(workers) == 1:
            for first, last in blocks:
                compute(first, last)
            return
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(max_workers=int(workers)) as pool:
            for done in [pool.submit(compute, first, last) for first, last in blocks]:
                done.result()


def bootstrap_block_counts(y, first: int, last: int, *, seed: int, column=None) -> np.ndarray:
    """Draw counts of replicates ``first … last − 1`` (a float array, replicates × rows):
    row ``b − first`` counts how often replicate ``b`` drew each row (:func:`bootstrap_rows`).
    ``column`` maps each row to its column of the counts (a permutation; default the
    identity), so callers can have the counts in the order they need, e.g. sorted by
    prediction. Each replicate has its own generator, so blocks can be drawn in any order."""
    y = np.asarray(y)
    n = y.shape[0]
    events, non_events = np.flatnonzero(y == 1), np.flatnonzero(y != 1)
    target = np.arange(n) if column is None else np.asarray(column)
    events, non_events = target[events], target[non_events]
    counts = np.empty((last - first, n))
    for b in range(first, last):
        counts[b - first] = np.bincount(draw_replicate(events, non_events, replicate=b, seed=seed), minlength=n)
    return counts


def percentile_interval(values, *, level: float) -> dict:
    """Percentile interval of replicate values; NaN marks a replicate where the statistic is
    undefined: those are counted and left out.

    Returns
    -------
    dict
        ``lower``, ``upper`` (None when fewer than 2 replicates are defined), ``defined``,
        ``undefined``.
    """
    values = np.asarray(values, dtype=float)
    ok = np.isfinite(values)
    defined = int(ok.sum())
    out = {"lower": None, "upper": None, "defined": defined, "undefined": int(values.size - defined)}
    if defined >= 2:
        low, high = np.quantile(values[ok], [(1.0 - level) / 2.0, (1.0 + level) / 2.0])
        out["lower"], out["upper"] = float(low), float(high)
    return out


def _weighted_rank_measures(w: np.ndarray, y_s: np.ndarray, starts: np.ndarray) -> tuple:
    """AUC and KS of each replicate from draw counts ``w`` (replicates × rows sorted by p).

    Rows with equal p form one block starting at ``starts``: a tie between an event and a
    non-event counts one half (AUC), and a cut-off never splits a block (KS).
    """
    wp = np.add.reduceat(w * y_s, starts, axis=1)
    wn = np.add.reduceat(w * (1.0 - y_s), starts, axis=1)
    total_p, total_n = wp.sum(axis=1), wn.sum(axis=1)
    below_n = np.cumsum(wn, axis=1) - wn
    auc_values = (wp * (below_n + 0.5 * wn)).sum(axis=1) / (total_p * total_n)
    # flag p >= value of block j: the share of events and non-events in blocks j, j+1, ...
    tpr = (total_p[:, None] - np.cumsum(wp, axis=1) + wp) / total_p[:, None]
    fpr = (total_n[:, None] - np.cumsum(wn, axis=1) + wn) / total_n[:, None]
    ks_values = np.maximum(np.max(tpr - fpr, axis=1), 0.0)
    return auc_values, ks_values


def _newton_rows(state, evaluate, *, max_iter: int, tolerance: float):
    """Newton's method run on many replicates at once, each with its own parameters.

    ``evaluate(params, rows)`` returns ``(objective, step)`` for the given replicate rows
    (objective to maximise; step the Newton step). A step is halved until the objective
    does not fall. Returns the parameters and a mask of the replicates that converged.
    """
    params = state
    count = params.shape[0]
    active = np.arange(count)
    converged = np.zeros(count, dtype=bool)
    objective, step = evaluate(params, active)
    for _ in range(max_iter):
        if active.size == 0:
            break
        length = np.ones(active.size)
        trial = params[active] + step
        trial_objective, trial_step = evaluate(trial, active)
        for _ in range(40):
            worse = ~(trial_objective >= objective - 1e-12 * np.abs(objective))
            if not worse.any():
                break
            length[worse] *= 0.5
            trial[worse] = params[active[worse]] + length[worse, None] * step[worse]
            trial_objective[worse], trial_step[worse] = evaluate(trial[worse], active[worse])
        moved = np.max(np.abs(length[:, None] * step), axis=1)
        params[active] = trial
        done = moved <= tolerance * np.maximum(1.0, np.max(np.abs(trial), axis=1))
        converged[active[done]] = True
        keep = ~done & np.isfinite(trial_objective)
        active, objective, step = active[keep], trial_objective[keep], trial_step[keep]
    return params, converged


def _calibration_start(y_s: np.ndarray, lp_s: np.ndarray) -> dict | None:
    """The whole sample's slope-model and offset-model parameters, by the same Newton steps
    as the replicates (every draw count 1): where the replicates start, since a replicate's
    fit lies near the sample's and so needs fewer steps. None when either fit fails there;
    the replicates then start from the event rate, as a lone fit does."""
    if y_s.size == 0 or lp_s[0] == lp_s[-1]:  # lp_s is sorted: one distinct prediction
        return None
    start = _calibration_params(np.ones((1, y_s.shape[0])), y_s, lp_s, None)
    if not (start["slope_ok"][0] and start["offset_ok"][0]):
        return None
    return {"slope": start["slope"][0], "offset": start["offset"][0]}


def _calibration_replicates(w: np.ndarray, y_s: np.ndarray, lp_s: np.ndarray, start: dict | None = None) -> tuple:
    """Calibration intercept (offset model) and slope of each replicate, weighted by draw
    counts; NaN where the fit is undefined (one distinct prediction) or did not converge.
    ``start``: where every replicate's Newton steps begin (:func:`_calibration_start`)."""
    fits = _calibration_params(w, y_s, lp_s, start)
    drawn = w > 0
    first, last = drawn.argmax(axis=1), w.shape[1] - 1 - drawn[:, ::-1].argmax(axis=1)
    varies = lp_s[first] != lp_s[last]
    slope = np.where(fits["slope_ok"] & varies, fits["slope"][:, 1], np.nan)
    intercept = np.where(fits["offset_ok"] & varies, fits["offset"][:, 0], np.nan)
    return intercept, slope


def _calibration_params(w: np.ndarray, y_s: np.ndarray, lp_s: np.ndarray, start: dict | None) -> dict:
    """Newton fits of the slope model ``a + b·lp`` and the offset model ``a + lp`` for every
    row of draw counts ``w``: their parameters and masks of the fits that converged."""
    from scipy.special import expit

    wy = w @ y_s
    n = w.sum(axis=1)

    def counts_of(rows):
        # ``rows`` is a sorted subset of the replicates: all of them means w itself (no copy).
        return w if rows.size == w.shape[0] else w[rows]

    def slope_model(params, rows):
        eta = params[:, :1] + params[:, 1:] * lp_s
        q, wr = expit(eta), counts_of(rows)
        loglik = (wr * (y_s * eta - np.logaddexp(0.0, eta))).sum(axis=1)
        resid, v = wr * (y_s - q), wr * q * (1.0 - q)
        g_a, g_s = resid.sum(axis=1), resid @ lp_s
        h_aa, h_as, h_ss = v.sum(axis=1), v @ lp_s, v @ (lp_s * lp_s)
        det = h_aa * h_ss - h_as * h_as
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.stack([(h_ss * g_a - h_as * g_s) / det, (h_aa * g_s - h_as * g_a) / det], axis=1)
        return loglik, step

    def offset_model(params, rows):
        eta = params[:, :1] + lp_s
        q, wr = expit(eta), counts_of(rows)
        loglik = (wr * (y_s * eta - np.logaddexp(0.0, eta))).sum(axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = ((wy[rows] - (wr * q).sum(axis=1)) / (wr * q * (1.0 - q)).sum(axis=1))[:, None]
        return loglik, step

    if start is None:
        rate = np.clip(wy / n, 1e-12, 1 - 1e-12)
        slope_start = np.stack([np.log(rate) - np.log1p(-rate), np.zeros_like(rate)], axis=1)
        offset_start = np.zeros((w.shape[0], 1))
    else:
        slope_start = np.tile(start["slope"], (w.shape[0], 1))
        offset_start = np.tile(start["offset"], (w.shape[0], 1))
    slope_params, slope_ok = _newton_rows(slope_start, slope_model, max_iter=100, tolerance=1e-10)
    offset_params, offset_ok = _newton_rows(offset_start, offset_model, max_iter=200, tolerance=1e-12)
    return {"slope": slope_params, "slope_ok": slope_ok, "offset": offset_params, "offset_ok": offset_ok}


#: Statistics of :func:`bootstrap_performance`, in the order they are reported.
BOOTSTRAP_METRICS = ("auc", "gini", "ks", "log_loss", "brier", "calibration_intercept", "calibration_slope")


def bootstrap_replicate_values(y, p, *, replicates: int, seed: int, workers: int = 1) -> dict:
    """Every replicate's value of each statistic in :data:`BOOTSTRAP_METRICS` (NaN where
    undefined), computed from draw counts without copying rows.

    Rows are sorted by ``p`` once; each replicate's counts are laid out in that order, so
    AUC and KS need one cumulative sum per replicate rather than a sort. The replicates
    come in fixed blocks (:func:`bootstrap_blocks`); ``workers`` threads compute blocks side
    by side. A block's arithmetic is the same whichever thread runs it, and BLAS runs on one
    thread inside the bootstrap, so the values are the same bits for any ``workers``.
    """
    y, p = outcomes_and_probabilities(y, p)
    _require_both_classes(y, "the stratified bootstrap")
    _check_bootstrap(replicates, seed)
    check_workers(workers)
    order = np.argsort(p, kind="stable")
    column = np.empty_like(order)
    column[order] = np.arange(order.size)
    p_s, y_s = p[order], y[order].astype(float)
    starts = np.flatnonzero(np.concatenate([[True], p_s[1:] != p_s[:-1]]))
    clipped = np.clip(p_s, _EPS, 1.0 - _EPS)
    loss_terms = -(y_s * np.log(clipped) + (1.0 - y_s) * np.log1p(-clipped))
    squared = (p_s - y_s) ** 2
    lp_s = _logit(p_s)
    values = {name: np.empty(replicates) for name in BOOTSTRAP_METRICS}
    start = _calibration_start(y_s, lp_s)

    def block_values(first: int, last: int) -> None:
        w = bootstrap_block_counts(y, first, last, seed=seed, column=column)
        block = slice(first, last)
        values["auc"][block], values["ks"][block] = _weighted_rank_measures(w, y_s, starts)
        values["log_loss"][block] = (w @ loss_terms) / y.shape[0]
        values["brier"][block] = (w @ squared) / y.shape[0]
        values["calibration_intercept"][block], values["calibration_slope"][block] = (
            _calibration_replicates(w, y_s, lp_s, start))

    run_blocks(block_values, bootstrap_blocks(y.shape[0], replicates), workers=workers)
    values["gini"] = 2.0 * values["auc"] - 1.0
    return values


NORMAL_METHOD = ("normal interval with the bootstrap standard error, estimate ± z·SE (Efron & Tibshirani 1993, "
                 "ch. 13): used when the replicates are cut by the draw budget, as a standard error needs far "
                 "fewer replicates than percentile tails")


def bootstrap_plan(n: int, *, replicates: int, max_draws: int | None) -> dict:
    """How many replicates to draw for ``n`` rows, and which interval to form from them.

    With ``max_draws`` set and ``replicates · n`` above it, the replicates are cut to
    ``max(max_draws // n, 50)`` (never more than asked) and the interval becomes the normal
    one with the bootstrap standard error.

    Examples
    --------
    >>> bootstrap_plan(3000, replicates=1000, max_draws=100_000_000)["replicates"]
    1000
    >>> bootstrap_plan(1_000_000, replicates=1000, max_draws=100_000_000)["replicates"]
    100
    """
    _check_bootstrap(replicates, 0)
    plan = {"replicates_requested": int(replicates), "replicates": int(replicates), "method": PERCENTILE_METHOD,
            "max_draws": max_draws, "reduced": None}
    if max_draws is not None and replicates * n > max_draws:
        plan["replicates"] = min(int(replicates), max(int(max_draws) // max(n, 1), 50))
        plan["method"] = NORMAL_METHOD
        plan["reduced"] = (f"{replicates:,} replicates of {n:,} rows exceed the budget of {max_draws:,} drawn rows "
                           f"(evaluation.bootstrap_max_draws): {plan['replicates']:,} replicates drawn")
    return plan


def bootstrap_interval(values, *, estimate, level: float, method: str) -> dict:
    """The interval of one statistic from its replicate values (NaN = undefined, counted):
    percentile, or normal with the bootstrap standard error (see :func:`bootstrap_plan`)."""
    if method == PERCENTILE_METHOD or estimate is None:
        return percentile_interval(values, level=level)
    # the normal quantile from scipy.special: the function scipy.stats.norm.ppf evaluates (the
    # same bits), without importing scipy.stats, which costs the decision stage about 1 s
    from scipy.special import ndtri

    values = np.asarray(values, dtype=float)
    ok = np.isfinite(values)
    out = {"lower": None, "upper": None, "defined": int(ok.sum()), "undefined": int(values.size - ok.sum())}
    if out["defined"] >= 2:
        half = float(ndtri(0.5 + level / 2.0)) * float(values[ok].std(ddof=1))
        out["lower"], out["upper"] = estimate - half, estimate + half
    return out


def bootstrap_performance(y, p, *, replicates: int, seed: int, level: float = 0.95, max_draws: int | None = None,
                          estimates: dict | None = None, workers: int = 1) -> dict:
    """Bootstrap intervals of the headline test measures.

    Each replicate resamples the rows as :func:`bootstrap_rows` states and recomputes AUC,
    Gini, KS, log loss, Brier score and the calibration intercept and slope exactly as
    :func:`summarise` defines them. A statistic undefined in a replicate (a calibration fit
    on one distinct prediction, or one that does not converge, e.g. under separation) is
    counted and left out of its interval. The interval is the percentile one unless the
    draw budget ``max_draws`` cuts the replicates (:func:`bootstrap_plan`); the normal one
    is centred on ``estimates`` (default: :func:`summarise` of ``y``, ``p``).

    Returns
    -------
    dict
        ``method``, ``resampling``, ``level``, ``replicates``, ``replicates_requested``,
        ``max_draws``, ``reduced`` (None, or why fewer replicates were drawn), ``seed`` and
        ``intervals``: statistic → ``{lower, upper, defined, undefined}``.
    """
    _check_level(level)
    y, p = outcomes_and_probabilities(y, p)
    plan = bootstrap_plan(y.shape[0], replicates=replicates, max_draws=max_draws)
    values = bootstrap_replicate_values(y, p, replicates=plan["replicates"], seed=seed, workers=workers)
    if plan["method"] != PERCENTILE_METHOD and estimates is None:
        estimates = summarise(y, p)
    estimates = estimates or {}
    return plan | {"resampling": BOOTSTRAP_RESAMPLING, "level": level, "seed": int(seed), "intervals": {
        name: bootstrap_interval(values[name], estimate=estimates.get(name), level=level, method=plan["method"])
        for name in BOOTSTRAP_METRICS}}


WALD_INTERCEPT_METHOD = ("Wald interval of the offset logistic fit, a ± z/√Σq(1 − q): resampling within each "
                         "outcome class fixes the number of events, which pins calibration-in-the-large, so "
                         "the stratified bootstrap is not used for it")


def calibration_intercept_interval(y, p, *, level: float = 0.95) -> dict:
    """Wald interval of the calibration intercept (slope fixed at 1, ``logit(p)`` as offset).

    The standard error is the inverse square root of the fit's information
    ``Σ q(1 − q)``, ``q = expit(a + logit p)`` at the estimate ``a``.

    Returns
    -------
    dict
        ``estimate``, ``se``, ``lower``, ``upper``, ``level``, ``method``.
    """
    from scipy.special import expit, ndtri  # ndtri is scipy.stats.norm.ppf

    _check_level(level)
    y, p = outcomes_and_probabilities(y, p)
    _require_both_classes(y, "calibration")
    lp = _logit(p)
    a = _calibration_in_the_large(y, lp)
    q = expit(a + lp)
    se = 1.0 / math.sqrt(float(np.sum(q * (1.0 - q))))
    half = float(ndtri(0.5 + level / 2.0)) * se
    return {"estimate": a, "se": se, "lower": a - half, "upper": a + half, "level": level,
            "method": WALD_INTERCEPT_METHOD}


#: The headline measures reported per cross-validation repeat.
REPEAT_MEASURES = ("auc", "gini", "ks", "log_loss", "brier", "calibration_intercept", "calibration_slope")


def repeat_summary(y, oof) -> dict:
    """Headline measures of each repeat's out-of-fold predictions, with their mean and range.

    ``oof`` (a data frame) holds one column of predictions per repeat (``p``, ``p_r2``, ...), as the fit
    stage writes them. The spread shows how much the figures move with the fold assignment
    alone; the evaluation's tables use repeat 1.

    Returns
    -------
    dict
        ``repeats`` (list of ``{"repeat", <measure>: value}``) and ``spread``
        (``{<measure>: {"mean", "min", "max"}}``; None where a repeat has no value).
    """
    columns = ["p"] + sorted((c for c in oof.columns if c.startswith("p_r")), key=lambda c: int(c[3:]))
    rows = []
    for repeat, column in enumerate(columns, start=1):
        found = summarise(y, oof[column].to_numpy())
        rows.append({"repeat": repeat} | {k: found[k] for k in REPEAT_MEASURES})
    spread = {}
    for key in REPEAT_MEASURES:
        values = [row[key] for row in rows]
        spread[key] = None if any(v is None for v in values) else {
            "mean": float(np.mean(values)), "min": float(min(values)), "max": float(max(values))}
    return {"repeats": rows, "spread": spread}
