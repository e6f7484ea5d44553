"""The proximal Newton path used by the inner cross-validation of L1 and elastic-net
candidates: optimality (KKT) conditions checked directly, and agreement with scikit-learn's
saga solver (reference library) on a small invented data set."""

import warnings

import numpy as np
import pytest
from scipy.special import expit
from sklearn.linear_model import LogisticRegression

from oddsmith.fitting.solvers import penalised_objective as _penalised_objective, proximal_newton_path as _proximal_newton_path

GRID = [0.01, 0.1, 1.0]


def _invented(n=800, p=6, seed=3):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p))
    beta = np.array([0.9, -0.6, 0.0, 0.3, 0.0, 0.0])[:p]
    y = (rng.random(n) < expit(-1.0 + X @ beta)).astype(int)
    return (X - X.mean(axis=0)) / X.std(axis=0), y


@pytest.mark.parametrize("l1_ratio", [1.0, 0.5])
def test_path_satisfies_the_optimality_conditions(l1_ratio):
    """Minimiser of C·Σ log loss + l1_ratio·|w|₁ + (1 − l1_ratio)/2·|w|²: the intercept's
    gradient is 0; a zero slope has |C·g_j| ≤ l1_ratio; a non-zero slope has
    C·g_j + (1 − l1_ratio)·w_j = −l1_ratio·sign(w_j)."""
    X, y = _invented()
    for C, (coef, converged) in zip(GRID, _proximal_newton_path(X, y, GRID, rows=None, l1_ratio=l1_ratio,
                                                                 max_iter=1000)):
        assert converged
        residual = expit(coef[0] + X @ coef[1:]) - y
        assert abs(C * residual.sum()) < 1e-6
        g = C * (X.T @ residual) + (1 - l1_ratio) * coef[1:]
        w = coef[1:]
        zero = w == 0
        assert np.all(np.abs(g[zero]) <= l1_ratio + 1e-6), (C, g[zero])
        assert np.allclose(g[~zero], -l1_ratio * np.sign(w[~zero]), atol=1e-6), (C, g[~zero])


def test_path_agrees_with_saga():
    X, y = _invented()
    path = _proximal_newton_path(X, y, GRID, rows=None, l1_ratio=1.0, max_iter=1000)
    for C, (coef, _) in zip(GRID, path):
        saga = LogisticRegression(C=C, l1_ratio=1.0, solver="saga", tol=1e-10, max_iter=100_000, random_state=0)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            saga.fit(X, y)
        ref = np.r_[saga.intercept_, saga.coef_[0]]
        ours = _penalised_objective(X, y.astype(float), None, coef, C=C, l1_ratio=1.0)
        theirs = _penalised_objective(X, y.astype(float), None, ref, C=C, l1_ratio=1.0)
        assert ours <= theirs + 1e-7, (C, ours, theirs)
        assert np.max(np.abs(coef - ref)) < 1e-4, (C, coef, ref)
