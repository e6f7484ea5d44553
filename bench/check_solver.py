"""Check the proximal Newton path of oddsmith.fitting.models against scikit-learn's saga run to a
tight tolerance, for L1 and elastic-net logistic regression on invented data.

Prints, per data set and C, the largest absolute coefficient difference and the objective
difference. Where every slope is 0 (the strongest penalties) saga's intercept converges
slowly and stops above the optimum; proximal Newton returns the closed form, the log-odds of
the event rate, there. Not a unit test (it takes a minute: saga at tol=1e-10 is slow); run it after
changing the solver::

    .venv/bin/python bench/check_solver.py
"""

from __future__ import annotations

import warnings

import numpy as np
from sklearn.linear_model import LogisticRegression

from oddsmith.fitting.solvers import penalised_objective as _penalised_objective, proximal_newton_path as _proximal_newton_path

GRID = [0.001, 0.01, 0.1, 1.0, 10.0]


def invented(n: int, p: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p))
    X[:, 1] = 0.8 * X[:, 0] + 0.6 * X[:, 1]  # a correlated pair
    beta = np.where(np.arange(p) < p // 2, rng.normal(0, 0.6, p), 0.0)
    y = (rng.random(n) < 1 / (1 + np.exp(-(-1.2 + X @ beta)))).astype(int)
    X = (X - X.mean(axis=0)) / X.std(axis=0)
    return X, y


def main() -> None:
    worst, saga_short = 0.0, []
    for seed, (n, p) in enumerate([(2000, 8), (5000, 20), (3000, 36)]):
        X, y = invented(n, p, seed)
        for l1_ratio in (1.0, 0.5):
            path = _proximal_newton_path(X, y, GRID, rows=None, l1_ratio=l1_ratio, max_iter=1000)
            for C, (coef, converged) in zip(GRID, path):
                reference = LogisticRegression(C=C, l1_ratio=l1_ratio, solver="saga", tol=1e-10,
                                               max_iter=100_000, random_state=0)
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    reference.fit(X, y)
                ref = np.r_[reference.intercept_, reference.coef_[0]]
                diff = float(np.max(np.abs(coef - ref)))
                gap = (_penalised_objective(X, y.astype(float), None, coef, C=C, l1_ratio=l1_ratio)
                       - _penalised_objective(X, y.astype(float), None, ref, C=C, l1_ratio=l1_ratio))
                if gap > -1e-9:  # saga at least as good: a fair comparison
                    worst = max(worst, diff)
                else:  # saga stopped short (its intercept moves slowly when every slope is 0)
                    saga_short.append((n, p, l1_ratio, C, diff, gap))
                print(f"n={n} p={p} l1_ratio={l1_ratio} C={C:g}: converged={converged} "
                      f"max|coef diff|={diff:.1e} objective(PN) - objective(saga)={gap:.1e} "
                      f"zeros PN/saga={int(np.sum(coef[1:] == 0))}/{int(np.sum(ref[1:] == 0))}")
    print(f"largest coefficient difference where saga reached an objective as low: {worst:.1e}")
    for n, p, l1_ratio, C, diff, gap in saga_short:
        print(f"saga stopped above the optimum: n={n} p={p} l1_ratio={l1_ratio} C={C:g} "
              f"(objective {-gap:.1e} higher, coefficients {diff:.1e} apart)")


if __name__ == "__main__":
    main()
