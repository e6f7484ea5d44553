"""Tests for oddsmith.data.diagnostics: VIF, correlations, events per parameter, leakage screen."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from sklearn.metrics import roc_auc_score
from statsmodels.stats.outliers_influence import variance_inflation_factor

from oddsmith.data.diagnostics import design_diagnostics, rank_auc
from oddsmith.errors import EventsPerVariableWarning


def _design(n: int = 500, *, seed: int = 3) -> tuple[pd.DataFrame, np.ndarray]:
    rng = np.random.default_rng(seed)
    a = rng.normal(size=n)
    b = 0.9 * a + 0.3 * rng.normal(size=n)  # strongly correlated with a
    c = rng.normal(size=n)
    d = (rng.random(n) < 0.3).astype(float)
    y = (rng.random(n) < 1 / (1 + np.exp(-(-1 + a)))).astype(np.int64)
    return pd.DataFrame({"a": a, "b": b, "c": c, "d": d}), y


def _slow_auc(y, score):
    """Count every event/non-event pair; a tie counts one half."""
    pos, neg = score[y == 1], score[y == 0]
    wins = sum(1.0 if p > q else 0.5 if p == q else 0.0 for p in pos for q in neg)
    return wins / (len(pos) * len(neg))


def test_vif_matches_statsmodels():
    X, y = _design()
    report = design_diagnostics(X, y)
    # statsmodels regresses each column on the others as given, so the constant must be included.
    exog = sm.add_constant(X.to_numpy())
    reference = [variance_inflation_factor(exog, i) for i in range(1, exog.shape[1])]
    ours = [entry["vif"] for entry in report["vif"]["values"]]
    np.testing.assert_allclose(ours, reference, rtol=1e-9)
    assert "common practice" in report["vif"]["basis"]


def test_vif_flags_above_threshold_and_perfect_collinearity():
    X, y = _design()
    X["a_again"] = 2 * X["a"] + 1
    report = design_diagnostics(X, y, vif_threshold=5.0)
    assert report["vif"]["perfectly_collinear"] == ["a", "a_again"]
    assert report["vif"]["flagged"] == ["a", "b", "a_again"]  # b: VIF about 9.4 > 5
    assert next(e for e in report["vif"]["values"] if e["column"] == "a_again")["vif"] is None
    assert "c" not in report["vif"]["flagged"]


def test_correlated_pairs_match_numpy():
    X, y = _design()
    report = design_diagnostics(X, y, corr_threshold=0.8)
    expected = np.corrcoef(X["a"], X["b"])[0, 1]
    assert expected > 0.8
    assert report["correlations"]["pairs"] == [{"a": "a", "b": "b", "r": pytest.approx(expected, rel=1e-12)}]
    assert design_diagnostics(X, y, corr_threshold=0.99)["correlations"]["pairs"] == []


def test_constant_columns_are_reported_and_left_out_of_vif():
    X, y = _design()
    X["flat"] = 1.0
    report = design_diagnostics(X, y)
    assert report["constant_columns"] == ["flat"]
    assert next(e for e in report["vif"]["values"] if e["column"] == "flat")["vif"] is None
    reference = variance_inflation_factor(sm.add_constant(X[["a", "b", "c", "d"]].to_numpy()), 3)
    assert next(e for e in report["vif"]["values"] if e["column"] == "c")["vif"] == pytest.approx(reference, rel=1e-9)
    assert any("constant design columns: flat" in w for w in report["warnings"])


def test_events_per_parameter_and_warning():
    X, y = _design(120)
    with pytest.warns(EventsPerVariableWarning, match="Peduzzi"):
        report = design_diagnostics(X, y)
    assert report["n_parameters"] == 5
    assert report["events"] == y.sum() and report["non_events"] == len(y) - y.sum()
    assert report["events_per_parameter"] == pytest.approx(min(y.sum(), len(y) - y.sum()) / 5)
    X, y = _design(2000)
    with warnings.catch_warnings():
        warnings.simplefilter("error", EventsPerVariableWarning)
        assert design_diagnostics(X, y)["events_per_parameter"] >= 10


def test_rank_auc_matches_sklearn_and_pair_count():
    rng = np.random.default_rng(0)
    y = (rng.random(300) < 0.3).astype(int)
    score = np.round(rng.normal(size=300) + y, 1)  # rounding creates ties
    assert rank_auc(y, score) == pytest.approx(roc_auc_score(y, score), rel=1e-12)
    assert rank_auc(y, score) == pytest.approx(_slow_auc(y, score), rel=1e-12)


def test_leakage_screen_flags_a_near_copy_of_the_outcome_and_an_identifier():
    X, y = _design()
    rng = np.random.default_rng(1)
    raw = pd.DataFrame({
        "balance": X["a"],
        "days_past_due": y * 30 + rng.integers(0, 3, len(y)),  # known only after the outcome
        "application_id": [f"A{i}" for i in range(len(y))],
        "region": rng.choice(["n", "s"], len(y)),
    })
    raw.loc[[0, 1, 2], "balance"] = np.nan
    features = [{"name": "balance", "type": "numeric"}, {"name": "days_past_due", "type": "numeric"},
                {"name": "application_id", "type": "categorical"}, {"name": "region", "type": "categorical"}]
    report = design_diagnostics(X, y, raw_train=raw, features=features)
    by_name = {f["feature"]: f for f in report["leakage"]["features"]}
    assert report["leakage"]["suspected"] == ["days_past_due", "application_id"]
    keep = raw["balance"].notna().to_numpy()
    auc = roc_auc_score(y[keep], raw["balance"][keep])
    assert by_name["balance"]["auc"] == pytest.approx(max(auc, 1 - auc), rel=1e-12)
    assert by_name["balance"]["n_used"] == len(y) - 3
    rates = pd.Series(y).groupby(raw["region"]).transform("mean")
    assert by_name["region"]["auc"] == pytest.approx(roc_auc_score(y, rates), rel=1e-12)
    assert any("suspected leakage" in w for w in report["warnings"])


def test_leakage_types_inferred_from_dtype_without_declarations():
    X, y = _design()
    raw = pd.DataFrame({"balance": -X["a"], "grade": np.where(X["d"] > 0, "x", "y")})
    report = design_diagnostics(X, y, raw_train=raw)
    assert [(f["feature"], f["type"]) for f in report["leakage"]["features"]] == [
        ("balance", "numeric"), ("grade", "categorical")]
    assert report["leakage"]["features"][0]["auc"] > 0.5  # max(AUC, 1 - AUC) for a reversed score


def test_bad_outcome_is_rejected():
    X, y = _design()
    with pytest.raises(ValueError, match=r"0/1 values, got \[2\] at rows \[4\]"):
        design_diagnostics(X, np.where(np.arange(len(y)) == 4, 2, y))
    with pytest.raises(ValueError, match="one value per design row"):
        design_diagnostics(X, y[:-1])


def test_a_leakage_screen_made_earlier_gives_the_same_report():
    # The features stage screens the raw columns first, frees them, then diagnoses the design.
    from oddsmith.data.diagnostics import leakage_screen

    rng = np.random.default_rng(8)
    raw = pd.DataFrame({"a": rng.normal(size=300), "b": rng.choice(["x", "y"], 300)})
    y = (rng.random(300) < 0.3).astype(int)
    X = pd.DataFrame({"a": raw["a"], "b=y": (raw["b"] == "y").astype(float)})
    together = design_diagnostics(X, y, raw_train=raw)
    screened = leakage_screen(raw, y, None, 0.95)
    assert design_diagnostics(X, y, leakage=screened) == together


def test_the_leakage_screen_shared_among_threads_is_the_same_report():
    # The features rule scores its features on two threads; each feature is scored alone.
    from oddsmith.data.diagnostics import leakage_screen

    rng = np.random.default_rng(9)
    raw = pd.DataFrame({f"x{i}": rng.normal(size=2_000) for i in range(7)}
                       | {"grade": rng.choice(["a", "b", None], 2_000)})
    raw.loc[::13, "x3"] = np.nan
    y = (rng.random(2_000) < 1 / (1 + np.exp(-raw["x0"].to_numpy()))).astype(int)
    alone = leakage_screen(raw, y, None, 0.6)
    assert [f["feature"] for f in alone["features"]] == list(raw.columns) and alone["suspected"] == ["x0"]
    for workers in (2, 3):
        assert leakage_screen(raw, y, None, 0.6, workers=workers) == alone
    with pytest.raises(ValueError, match="workers must be an integer of at least 1"):
        leakage_screen(raw, y, None, 0.6, workers=0)
