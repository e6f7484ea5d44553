"""Diagnostics of a training design matrix, written next to the feature recipe.

Reported, never fixed: the number of parameters and events per parameter (Peduzzi et al.
1996), strongly correlated pairs of design columns, variance inflation factors, constant
columns, and a leakage screen that flags any single raw feature separating events from
non-events almost perfectly on its own.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from oddsmith.assessment.ranks import midranks
from oddsmith.errors import ArgumentError, EventsPerVariableWarning, check_workers

# Peduzzi et al., J. Clinical Epidemiology 49 (1996).
MIN_EVENTS_PER_PARAMETER = 10
# 1 - R^2 below this is treated as perfect collinearity (VIF reported as None).
_COLLINEAR_TOLERANCE = 1e-10
_MISSING_LEVEL = "(missing)"


def design_diagnostics(
    X_train: pd.DataFrame,
    y_train,
    *,
    raw_train: pd.DataFrame | None = None,
    features: list | None = None,
    corr_threshold: float = 0.8,
    vif_threshold: float = 10.0,
    leak_auc: float = 0.95,
    leakage: dict | None = None,
) -> dict:
    """Diagnose a training design matrix.

    Parameters
    ----------
    X_train : pandas.DataFrame
        Design columns of the training rows, without intercept.
    y_train : array-like of 0/1
        Outcome of the same rows.
    raw_train : pandas.DataFrame, optional
        Raw feature columns of the same rows, for the leakage screen.
    features : list of dict, optional
        Feature declarations (``name``, ``type``); default: every column of ``raw_train``,
        numeric by dtype, categorical otherwise.
    corr_threshold : float, default 0.8
        Report pairs of columns with Pearson ``|r|`` above this.
    vif_threshold : float, default 10.0
        Flag variance inflation factors above this (a common-practice rule of thumb).
    leak_auc : float, default 0.95
        Report a raw feature whose single-feature training AUC exceeds this.
    leakage : dict, optional
        A result of :func:`leakage_screen` computed earlier on the same rows (so the caller
        can free the raw columns before building the design); replaces ``raw_train``.

    Returns
    -------
    dict
        ``n_rows``, ``n_parameters``, ``events``, ``non_events``, ``events_per_parameter``,
        ``constant_columns``, ``correlations``, ``vif``, ``leakage``, ``warnings``.

    Raises
    ------
    ValueError
        If the outcome is not 0/1, lengths differ, or the design holds non-finite values.

    Examples
    --------
    >>> X = pd.DataFrame({"a": [0.0, 1, 2, 3, 4, 5], "b": [1.0, 0, 1, 0, 1, 1]})
    >>> design_diagnostics(X, [0, 0, 1, 0, 1, 1])["n_parameters"]
    3
    """
    X = pd.DataFrame(X_train)
    y = _outcome(y_train, len(X))
    values = _design_values(X)
    constant = [c for c, v in zip(X.columns, values.T) if len(v) and v.max() == v.min()]
    varying = [i for i, c in enumerate(X.columns) if c not in constant]
    corr = _correlation(values if len(varying) == values.shape[1] else values[:, varying])
    names = [str(X.columns[i]) for i in varying]
    report = _epv(y, X.shape[1] + 1)
    report["n_rows"] = int(len(X))
    report["constant_columns"] = [str(c) for c in constant]
    report["correlations"] = _strong_pairs(corr, names, corr_threshold)
    report["vif"] = _vif_report(corr, names, [str(c) for c in constant], vif_threshold)
    report["leakage"] = leakage if leakage is not None else leakage_screen(raw_train, y, features, leak_auc)
    report["warnings"] = _warnings(report)
    return report


# ---------------------------------------------------------------------------- inputs


def _outcome(y_train, n_rows: int) -> np.ndarray:
    y = np.asarray(y_train)
    if y.shape != (n_rows,):
        raise ArgumentError(f"y_train must have one value per design row ({n_rows}), got shape {y.shape}")
    bad = ~np.isin(y.astype(float), (0.0, 1.0))
    if bad.any():
        raise ArgumentError(f"y_train must hold 0/1 values, got {sorted(set(y[bad].tolist()))[:5]} at rows {np.flatnonzero(bad)[:5].tolist()}")
    return y.astype(np.int64)


def _design_values(X: pd.DataFrame) -> np.ndarray:
    # A frame of float64 columns in one block gives a view here, not a copy.
    values = X.to_numpy(dtype=np.float64, copy=False)
    finite = np.array([np.isfinite(values[:, j]).all() for j in range(values.shape[1])], dtype=bool)
    if not finite.all():
        columns = [str(c) for c in X.columns[~finite]]
        raise ArgumentError(f"design matrix has non-finite values in columns {columns[:5]}")
    return values


# ---------------------------------------------------------------------------- events per parameter


def _epv(y: np.ndarray, n_parameters: int) -> dict:
    events = int(y.sum())
    non_events = int(len(y) - events)
    return {
        "n_parameters": n_parameters,
        "events": events,
        "non_events": non_events,
        "events_per_parameter": min(events, non_events) / n_parameters,
        "events_per_parameter_basis": (
            "minority-class count divided by design columns + intercept; below 10 is a warning "
            "(Peduzzi et al. 1996)"
        ),
    }


# ---------------------------------------------------------------------------- correlation and VIF


def _correlation(values: np.ndarray, block_rows: int = 65_536) -> np.ndarray:
    """Pearson correlations of the columns, centred Gram matrix accumulated by row blocks
    (no centred copy of the whole matrix is made)."""
    means = values.mean(axis=0)
    cross = np.zeros((values.shape[1], values.shape[1]))
    for start in range(0, values.shape[0], block_rows):
        centred = values[start:start + block_rows] - means
        cross += centred.T @ centred
    scale = np.sqrt(np.diag(cross))
    corr = cross / np.outer(scale, scale)
    np.fill_diagonal(corr, 1.0)
    return np.clip(corr, -1.0, 1.0)


def _strong_pairs(corr: np.ndarray, names: list, threshold: float) -> dict:
    upper_i, upper_j = np.triu_indices(len(names), k=1)
    r = corr[upper_i, upper_j]
    chosen = np.flatnonzero(np.abs(r) > threshold)
    chosen = chosen[np.argsort(-np.abs(r[chosen]), kind="stable")]
    pairs = [{"a": names[upper_i[p]], "b": names[upper_j[p]], "r": float(r[p])} for p in chosen]
    return {"threshold": threshold, "method": "Pearson correlation on the training rows", "pairs": pairs}


def variance_inflation(corr: np.ndarray) -> np.ndarray:
    """Variance inflation factors from a correlation matrix of non-constant columns.

    ``VIF_j = 1 / (1 - R_j^2)`` where ``R_j^2`` is the R^2 of regressing column j on every
    other column with an intercept, computed as ``r' R^+ r`` from the correlations (``R^+`` is
    the pseudo-inverse of the others' correlation matrix). Perfect collinearity gives inf.
    """
    k = corr.shape[0]
    result = np.ones(k)
    for j in range(k):
        others = np.arange(k) != j
        r = corr[others, j]
        r_squared = r @ np.linalg.pinv(corr[np.ix_(others, others)], hermitian=True) @ r if k > 1 else 0.0
        gap = 1.0 - r_squared
        result[j] = np.inf if gap < _COLLINEAR_TOLERANCE else 1.0 / gap
    return result


def _vif_report(corr: np.ndarray, names: list, constant: list, threshold: float) -> dict:
    vif = variance_inflation(corr) if names else np.array([])
    entries = [{"column": c, "vif": None if np.isinf(v) else float(v)} for c, v in zip(names, vif)]
    entries += [{"column": c, "vif": None} for c in constant]
    return {
        "threshold": threshold,
        "basis": f"VIF above {threshold:g} flagged: common practice (a rule of thumb), not a statistical test",
        "values": entries,
        "flagged": [c for c, v in zip(names, vif) if v > threshold],
        "perfectly_collinear": [c for c, v in zip(names, vif) if np.isinf(v)],
    }


# ---------------------------------------------------------------------------- leakage screen


def leakage_screen(raw: pd.DataFrame | None, y, features: list | None, threshold: float = 0.95, *,
                   workers: int = 1) -> dict:
    """The leakage part of :func:`design_diagnostics`: single-feature training AUC per raw feature.

    ``workers`` threads score the features side by side (each feature's AUC is computed
    alone, so the result does not depend on it)."""
    y = np.asarray(y)
    result = {
        "threshold": threshold,
        "method": (
            "single-feature training AUC, max(AUC, 1 - AUC): numeric raw values with missing rows dropped; "
            "categoricals scored by their level's training event rate (in-sample, so a column with many "
            "levels, such as an identifier, scores high)"
        ),
        "features": [],
        "suspected": [],
    }
    if raw is None:
        return result
    if len(raw) != len(y):
        raise ArgumentError(f"raw_train must have one row per design row ({len(y)}), got {len(raw)}")
    kinds = _feature_kinds(raw, features)
    check_workers(workers)
    if workers == 1 or len(kinds) < 2:
        scored = [_single_feature_auc(raw[name], y, kind) for name, kind in kinds]
    else:
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(max_workers=workers) as pool:
            scored = list(pool.map(lambda named: _single_feature_auc(raw[named[0]], y, named[1]), kinds))
    for (name, kind), (auc, n_used) in zip(kinds, scored):
        result["features"].append({"feature": name, "type": kind, "auc": auc, "n_used": n_used})
        if auc is not None and auc > threshold:
            result["suspected"].append(name)
    return result


def _feature_kinds(raw: pd.DataFrame, features: list | None) -> list[tuple[str, str]]:
    if features is not None:
        return [(f["name"], f["type"]) for f in features if f["name"] in raw.columns]
    return [(str(c), "numeric" if pd.api.types.is_numeric_dtype(raw[c]) else "categorical") for c in raw.columns]


def _single_feature_auc(values: pd.Series, y: np.ndarray, kind: str) -> tuple[float | None, int]:
    if kind == "numeric":
        x = values.to_numpy(dtype=np.float64, na_value=np.nan)
        keep = ~np.isnan(x)
        score, outcome = x[keep], y[keep]
    else:
        score, outcome = _level_event_rate(values, y), y
    if outcome.min(initial=1) == outcome.max(initial=0):
        return None, int(len(outcome))
    auc = rank_auc(outcome, score)
    return float(max(auc, 1.0 - auc)), int(len(outcome))


def _level_event_rate(values: pd.Series, y: np.ndarray) -> np.ndarray:
    missing = values.isna().to_numpy()
    text = np.array([_MISSING_LEVEL if m else str(v) for v, m in zip(values.tolist(), missing)], dtype=object)
    codes, _ = pd.factorize(text, sort=True)
    rate = np.bincount(codes, weights=y) / np.bincount(codes)
    return rate[codes]


def rank_auc(y: np.ndarray, score: np.ndarray) -> float:
    """Area under the ROC curve by the Mann-Whitney rank sum (ties get average ranks)."""
    ranks = midranks(score)
    n_pos = int(y.sum())
    n_neg = len(y) - n_pos
    return float((ranks[y == 1].sum() - n_pos * (n_pos + 1) / 2) / (n_pos * n_neg))


# ---------------------------------------------------------------------------- warnings


def _warnings(report: dict) -> list[str]:
    found = []
    if report["events_per_parameter"] < MIN_EVENTS_PER_PARAMETER:
        text = (
            f"{report['events_per_parameter']:.2f} events per parameter "
            f"({min(report['events'], report['non_events'])} minority-class events, {report['n_parameters']} "
            "parameters) is below 10 (Peduzzi et al. 1996)"
        )
        warnings.warn(text, EventsPerVariableWarning, stacklevel=3)
        found.append(text)
    if report["constant_columns"]:
        found.append(f"constant design columns: {', '.join(report['constant_columns'])}")
    for pair in report["correlations"]["pairs"]:
        found.append(f"columns {pair['a']!r} and {pair['b']!r} correlate at r = {pair['r']:.3f}")
    vif = report["vif"]
    if vif["flagged"]:
        found.append(f"VIF above {vif['threshold']:g} (common practice): {', '.join(vif['flagged'])}")
    if report["leakage"]["suspected"]:
        found.append(
            f"suspected leakage: single-feature training AUC above {report['leakage']['threshold']} for "
            f"{', '.join(report['leakage']['suspected'])}"
        )
    return found
