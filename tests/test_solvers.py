"""The row-blocked solvers: derivatives of the log-likelihood, fits on a subset of rows
without copying them, and blocks that cross the block size."""

import numpy as np
import pandas as pd
import pytest

from oddsmith.fitting import solvers
from oddsmith.fitting.models import KINDS, PENALISED_KINDS, fit_candidate, fit_design, inverse_link


@pytest.mark.parametrize("link", ["logit", "probit", "cloglog"])
def test_likelihood_derivatives_match_finite_differences(link):
    eta = np.array([-30.0, -8.0, -2.0, -0.3, 0.0, 0.4, 1.5, 3.0, 6.0])
    for y in (0.0, 1.0):
        outcome = np.full(eta.size, y)
        ll, first, second = solvers.likelihood_terms(link, eta, outcome)
        # the log-likelihood itself, from the inverse link
        p = inverse_link(link, eta)
        with np.errstate(divide="ignore"):
            direct = np.log(p) if y else np.log1p(-p)
        # (where the direct form is itself accurate: p and 1 - p not tiny)
        finite = np.isfinite(direct) & (np.abs(direct) < 15)
        np.testing.assert_allclose(ll[finite], direct[finite], rtol=1e-9, atol=1e-12)
        h = 1e-5
        up = solvers.likelihood_terms(link, eta + h, outcome)
        down = solvers.likelihood_terms(link, eta - h, outcome)
        np.testing.assert_allclose(first, (up[0] - down[0]) / (2 * h), rtol=1e-5, atol=1e-7)
        np.testing.assert_allclose(second, (up[1] - down[1]) / (2 * h), rtol=1e-5, atol=1e-7)
        assert np.all(second <= 0.0)  # concave in eta for all three links


def _data(n=3000, seed=4):
    rng = np.random.default_rng(seed)
    X = pd.DataFrame(rng.standard_normal((n, 3)), columns=["a", "b", "c"])
    y = (rng.random(n) < inverse_link("logit", -1.0 + X.to_numpy() @ [0.7, -0.4, 0.0])).astype(int)
    return X, y


@pytest.mark.parametrize("kind", KINDS)
def test_fit_on_rows_equals_fit_on_a_copy_of_those_rows(kind, monkeypatch):
    # Small blocks, so the rows of one fit span many blocks.
    monkeypatch.setattr(solvers, "ROW_BLOCK", 257)
    X, y = _data()
    rows = np.flatnonzero(np.arange(len(y)) % 5 != 2)
    options = {"grid": [0.01, 0.1, 1.0]} if kind in PENALISED_KINDS else None
    on_rows = fit_design(X.to_numpy(), list(X.columns), y, rows=rows, kind=kind, options=options, seed=7)
    copied = fit_candidate(X.iloc[rows].reset_index(drop=True), y[rows], kind=kind, options=options, seed=7)
    assert on_rows.n_obs == rows.size and on_rows.n_events == int(y[rows].sum())
    assert on_rows.intercept == pytest.approx(copied.intercept, rel=1e-10, abs=1e-12)
    for name in X.columns:
        assert on_rows.coefficients[name] == pytest.approx(copied.coefficients[name], rel=1e-9, abs=1e-12)
    for ours, theirs in zip(on_rows.coef_table, copied.coef_table):
        assert ours["std_error"] == pytest.approx(theirs["std_error"], rel=1e-9)


def test_fit_design_names_bad_values_and_shapes():
    X, y = _data(200)
    values = X.to_numpy().copy()
    values[5, 1] = np.nan
    with pytest.raises(ValueError, match=r"non-finite values in columns \['b'\]"):
        fit_design(values, list(X.columns), y, kind="logit")
    # the bad row is not among the rows fitted: accepted
    fit_design(values, list(X.columns), y, rows=np.r_[0:5, 6:200], kind="logit")
    with pytest.raises(ValueError, match="3 columns"):
        fit_design(values[:, :2], list(X.columns), y, kind="logit")
    with pytest.raises(ValueError, match="one per row"):
        fit_design(X.to_numpy(), list(X.columns), y[:-1], kind="logit")


@pytest.mark.parametrize("kind", ["logit", "cloglog", "l1", "l2"])
def test_a_fit_on_rows_never_copies_the_design(kind, monkeypatch):
    # The property the fit jobs' memory rests on: fitting on 80% of the rows allocates far less
    # than a copy of those rows (numpy allocations are traced by tracemalloc). Blocks of 4,096
    # rows (1.3 MB here) keep the working memory small against the 51 MB a copy would take.
    import tracemalloc

    import sklearn.model_selection  # noqa: F401 (imported by the penalised fit; module objects are not data)

    monkeypatch.setattr(solvers, "ROW_BLOCK", 4096)
    rng = np.random.default_rng(2)
    values = rng.standard_normal((200_000, 40))
    y = (rng.random(200_000) < inverse_link("logit", -1.2 + values[:, 0] - 0.5 * values[:, 1])).astype(int)
    rows = np.flatnonzero(np.arange(200_000) % 5 != 0)
    names = [f"x{j}" for j in range(40)]
    options = {"grid": [0.01, 1.0], "inner_folds": 2} if kind in PENALISED_KINDS else None
    tracemalloc.start()
    try:
        fit_design(values, names, y, rows=rows, kind=kind, options=options)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    copy_of_rows = rows.size * values.shape[1] * 8  # 51 MB; row-length vectors (outcome, fold
    assert peak < 0.5 * copy_of_rows, (peak, copy_of_rows)  # indexes, predictions) are 1/40 each
