"""Tests for oddsmith.assessment.metrics: outside references, slow reference implementations, toy cases."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from sklearn import metrics as skm
from statsmodels.stats.nonparametric import rank_compare_2indep

from oddsmith.assessment import metrics, ranks
from oddsmith.errors import OddsmithError


def _sample(seed: int, n: int = 400, *, decimals: int | None = 2):
    """Outcomes drawn from a logistic model; rounded predictions create many ties."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    p = 1.0 / (1.0 + np.exp(-(0.3 + 1.2 * x)))
    y = (rng.random(n) < p).astype(int)
    return y, (np.round(p, decimals) if decimals is not None else p)


# ------------------------------------------------------------------ slow reference implementations


def _slow_auc(y, p):
    """Count every positive–negative pair; a tie counts one half."""
    pos = [s for s, t in zip(p, y) if t == 1]
    neg = [s for s, t in zip(p, y) if t == 0]
    wins = 0.0
    for a in pos:
        for b in neg:
            wins += 1.0 if a > b else 0.5 if a == b else 0.0
    return wins / (len(pos) * len(neg))


def _slow_hosmer_lemeshow(y, p, groups):
    """Hosmer–Lemeshow written from the definition with plain loops (see docs/references.md)."""
    rows = sorted(zip(p, y), key=lambda r: r[0])
    n = len(rows)
    cuts = []
    for k in range(1, groups):
        c = n * k // groups
        while 0 < c < n and rows[c - 1][0] == rows[c][0]:
            c += 1
        if 0 < c < n and c not in cuts:
            cuts.append(c)
    edges = [0] + sorted(cuts) + [n]
    statistic, sizes = 0.0, []
    for lo, hi in zip(edges[:-1], edges[1:]):
        size = hi - lo
        observed = sum(r[1] for r in rows[lo:hi])
        expected = sum(min(max(r[0], 1e-15), 1 - 1e-15) for r in rows[lo:hi])
        statistic += (observed - expected) ** 2 / (expected * (1 - expected / size))
        sizes.append(size)
    return statistic, len(sizes) - 2, sizes


# ------------------------------------------------------------------ discrimination and accuracy


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_auc_log_loss_brier_match_sklearn(seed):
    # scikit-learn as the reference library (docs/references.md)
    y, p = _sample(seed)
    assert metrics.auc(y, p) == pytest.approx(skm.roc_auc_score(y, p), abs=1e-12)
    assert metrics.log_loss(y, p) == pytest.approx(skm.log_loss(y, p), rel=1e-12)
    assert metrics.brier(y, p) == pytest.approx(skm.brier_score_loss(y, p), rel=1e-12)


@pytest.mark.parametrize("seed", [3, 4])
def test_auc_matches_slow_pair_count(seed):
    y, p = _sample(seed, n=250, decimals=1)
    assert metrics.auc(y, p) == pytest.approx(_slow_auc(y, p), abs=1e-12)


def test_auc_toy_case_by_hand():
    # pairs (pos, neg): (0.35>0.1) (0.35<0.4) (0.8>0.1) (0.8>0.4) -> 3 of 4; a tie adds one half
    assert metrics.auc([0, 0, 1, 1], [0.1, 0.4, 0.35, 0.8]) == 0.75
    assert metrics.auc([0, 0, 1, 1], [0.1, 0.4, 0.4, 0.8]) == 0.875


@pytest.mark.parametrize("seed", [5, 6])
def test_gini_matches_somers_d(seed):
    # Engelmann, Hayden & Tasche (2003): accuracy ratio = Somers' D; scipy.stats.somersd
    y, p = _sample(seed)
    assert metrics.gini(y, p) == pytest.approx(stats.somersd(y, p).statistic, abs=1e-10)


@pytest.mark.parametrize("seed", [7, 8])
def test_ks_matches_two_sample_ks(seed):
    # common practice in credit scoring: KS = two-sample KS distance of the class score
    # distributions; scipy.stats.ks_2samp as the reference (the score ranks positives higher)
    y, p = _sample(seed)
    expected = stats.ks_2samp(p[y == 1], p[y == 0]).statistic
    assert metrics.ks(y, p) == pytest.approx(expected, abs=1e-12)


def test_ks_toy_case_by_hand():
    # negatives 0.1, 0.2, 0.8; positives 0.7, 0.9. Cut p >= 0.7 flags both positives and one
    # negative (TPR 1, FPR 1/3); every other cut does worse
    y = [0, 0, 0, 1, 1]
    p = [0.1, 0.2, 0.8, 0.7, 0.9]
    assert metrics.ks(y, p) == pytest.approx(2.0 / 3.0, abs=1e-15)


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.tuples(st.integers(0, 1), st.integers(0, 20)), min_size=2, max_size=40).filter(
        lambda rows: 0 < sum(r[0] for r in rows) < len(rows)
    )
)
def test_auc_swapping_the_classes_mirrors_it(rows):
    y = np.array([r[0] for r in rows])
    p = np.array([r[1] for r in rows]) / 20.0
    assert metrics.auc(y, p) == pytest.approx(1.0 - metrics.auc(1 - y, p), abs=1e-12)
    assert metrics.auc(y, p) == pytest.approx(metrics.auc(1 - y, 1.0 - p), abs=1e-12)


# ------------------------------------------------------------------ calibration


def test_calibration_of_a_recalibrated_score_is_ideal():
    # if p is exactly the logistic refit of y on logit(q), refitting p gives slope 1, intercept 0
    y, q = _sample(9, n=600, decimals=None)
    lq = np.log(q / (1 - q))
    fit = sm.GLM(y, sm.add_constant(lq), family=sm.families.Binomial()).fit()
    p = fit.predict(sm.add_constant(lq))
    result = metrics.calibration_intercept_slope(y, p)
    assert result["slope"] == pytest.approx(1.0, abs=1e-6)
    assert result["intercept"] == pytest.approx(0.0, abs=1e-6)


def test_calibration_detects_over_and_under_prediction():
    y, p = _sample(10, n=2000, decimals=None)
    lp = np.log(p / (1 - p))
    too_extreme = 1.0 / (1.0 + np.exp(-2.0 * lp))
    too_low = 1.0 / (1.0 + np.exp(-(lp - 1.0)))
    assert metrics.calibration_intercept_slope(y, too_extreme)["slope"] < 0.7
    # predictions shifted down by 1 on the logit scale: calibration-in-the-large near +1
    assert metrics.calibration_intercept_slope(y, too_low)["intercept"] > 0.7


def test_calibration_fits_solve_their_score_equations():
    # the MLE of a logistic model with a constant satisfies Σ expit(fitted) = Σ y; with the
    # slope free it also satisfies Σ lp·expit(fitted) = Σ lp·y
    y, p = _sample(20, n=500, decimals=None)
    lp = np.log(p / (1 - p))
    result = metrics.calibration_intercept_slope(y, p)
    in_the_large = 1.0 / (1.0 + np.exp(-(result["intercept"] + lp)))
    assert in_the_large.sum() == pytest.approx(y.sum(), rel=1e-8)
    fit = sm.GLM(y, sm.add_constant(lp), family=sm.families.Binomial()).fit()
    assert result["slope"] == pytest.approx(fit.params[1], rel=1e-10)
    fitted = fit.predict(sm.add_constant(lp))
    assert np.dot(lp, fitted) == pytest.approx(np.dot(lp, y), rel=1e-8)


def test_calibration_refuses_constant_predictions_and_single_class():
    y = np.array([1, 0, 0, 0, 1, 0, 0, 0, 0, 1])
    with pytest.raises(OddsmithError, match="every prediction equals 0.2"):
        metrics.calibration_intercept_slope(y, np.full(10, 0.2))
    with pytest.raises(OddsmithError, match="every outcome is 0"):
        metrics.calibration_intercept_slope(np.zeros(10, dtype=int), np.linspace(0.1, 0.9, 10))


# ------------------------------------------------------------------ Hosmer–Lemeshow and bins


@pytest.mark.parametrize("seed, decimals", [(11, 1), (12, 2), (13, None)])
def test_hosmer_lemeshow_matches_slow_reference(seed, decimals):
    y, p = _sample(seed, n=500, decimals=decimals)
    statistic, df, sizes = _slow_hosmer_lemeshow(list(y), list(p), 10)
    result = metrics.hosmer_lemeshow(y, p)
    assert result["statistic"] == pytest.approx(statistic, rel=1e-10)
    assert result["df"] == df
    assert [g["n"] for g in result["groups"]] == sizes
    assert result["p_value"] == pytest.approx(stats.chi2.sf(statistic, df), rel=1e-10)


def test_hosmer_lemeshow_keeps_ties_together_and_reduces_df():
    # five distinct values, 20 rows each: cuts at multiples of 10 fall inside runs and move up
    p = np.repeat([0.1, 0.3, 0.5, 0.7, 0.9], 20)
    y = np.zeros(100, dtype=int)
    y[[0, 1, 20, 21, 22, 23, 24, 40, 41, 42, 43, 44, 45, 46, 47, 48, 49, 50]] = 1
    result = metrics.hosmer_lemeshow(y, p)
    assert [g["n"] for g in result["groups"]] == [20, 20, 20, 20, 20]
    assert result["df"] == 3
    for group in result["groups"]:
        assert group["p_min"] == group["p_max"]
    # by hand: O = 2, 5, 11, 0, 0; E = 2, 6, 10, 14, 18; n = 20
    by_hand = (
        0.0
        + (5 - 6) ** 2 / (6 * (1 - 6 / 20))
        + (11 - 10) ** 2 / (10 * (1 - 10 / 20))
        + 14**2 / (14 * (1 - 14 / 20))
        + 18**2 / (18 * (1 - 18 / 20))
    )
    assert result["statistic"] == pytest.approx(by_hand, rel=1e-12)


def test_hosmer_lemeshow_with_two_distinct_values_has_no_p_value():
    y = np.array([0, 1, 0, 1, 1, 0])
    p = np.array([0.2, 0.2, 0.2, 0.7, 0.7, 0.7])
    result = metrics.hosmer_lemeshow(y, p)
    assert result["df"] == 0
    assert result["p_value"] is None


def test_reliability_bins_wilson_interval_and_counts():
    y, p = _sample(14, n=300, decimals=2)
    rows = metrics.reliability_bins(y, p, bins=5)
    assert sum(r["n"] for r in rows) == 300
    assert sum(r["events"] for r in rows) == int(y.sum())
    for left, right in zip(rows[:-1], rows[1:]):
        assert left["upper"] < right["lower"]  # ties never split across bins
    z = stats.norm.ppf(0.975)
    for r in rows:
        # Wilson score interval written out (Wilson 1927)
        n, phat = r["n"], r["observed_rate"]
        centre = (phat + z * z / (2 * n)) / (1 + z * z / n)
        half = z / (1 + z * z / n) * math.sqrt(phat * (1 - phat) / n + z * z / (4 * n * n))
        assert r["ci_low"] == pytest.approx(centre - half, abs=1e-12)
        assert r["ci_high"] == pytest.approx(centre + half, abs=1e-12)
        assert r["lower"] <= r["mean_predicted"] <= r["upper"]


# ------------------------------------------------------------------ DeLong


@pytest.mark.parametrize("seed, decimals", [(15, 2), (16, None)])
def test_delong_variance_matches_statsmodels(seed, decimals):
    # DeLong, DeLong & Clarke-Pearson (1988) via statsmodels rank_compare_2indep; its prob1
    # is P(neg > pos) + ties/2 = 1 - AUC, whose variance equals that of the AUC
    y, p = _sample(seed, n=400, decimals=decimals)
    reference = rank_compare_2indep(p[y == 0], p[y == 1])
    assert reference.prob1 == pytest.approx(1.0 - metrics.auc(y, p), abs=1e-12)
    assert metrics.delong_auc_variance(y, p) == pytest.approx(reference.var_prob, rel=1e-10)


def test_delong_variance_toy_case_by_hand():
    # positives 0.8, 0.35; negatives 0.4, 0.1. Components: V10 = (1, 0.5), V01 = (0.5, 1)
    # var = s²(V10)/2 + s²(V01)/2 = 0.125/2 + 0.125/2
    assert metrics.delong_auc_variance([0, 0, 1, 1], [0.1, 0.4, 0.35, 0.8]) == pytest.approx(
        0.125, abs=1e-15
    )


def test_delong_test_of_a_score_with_itself_plus_noise():
    y, p = _sample(17, n=400, decimals=None)
    rng = np.random.default_rng(170)
    noisy = np.clip(p + rng.normal(scale=0.25, size=p.shape), 0, 1)
    result = metrics.delong_test(y, p, noisy)
    assert result["auc_a"] == pytest.approx(metrics.auc(y, p), abs=1e-12)
    assert result["auc_b"] == pytest.approx(metrics.auc(y, noisy), abs=1e-12)
    assert result["difference"] > 0
    # var(a - b) = var(a) + var(b) - 2 cov(a, b) <= (se_a + se_b)²
    se_a = math.sqrt(metrics.delong_auc_variance(y, p))
    se_b = math.sqrt(metrics.delong_auc_variance(y, noisy))
    assert 0 < result["se"] <= se_a + se_b
    assert result["z"] == pytest.approx(result["difference"] / result["se"], rel=1e-12)
    assert result["p_value"] == pytest.approx(2 * stats.norm.sf(abs(result["z"])), rel=1e-12)
    identical = metrics.delong_test(y, p, p)
    assert identical["z"] is None and identical["p_value"] is None
    assert "zero variance" in identical["note"]


def test_auc_confidence_interval_is_clipped_and_uses_delong_se():
    y, p = _sample(18, n=300, decimals=None)
    ci = metrics.auc_confidence_interval(y, p, level=0.9)
    se = math.sqrt(metrics.delong_auc_variance(y, p))
    assert ci["se"] == pytest.approx(se, rel=1e-12)
    assert ci["lower"] == pytest.approx(ci["auc"] - stats.norm.ppf(0.95) * se, rel=1e-12)
    near_perfect = metrics.auc_confidence_interval(
        [0, 0, 0, 1, 1, 1], [0.1, 0.2, 0.6, 0.5, 0.8, 0.9]
    )
    assert near_perfect["upper"] == 1.0
    with pytest.raises(OddsmithError, match="level must be .* got 95"):
        metrics.auc_confidence_interval(y, p, level=95)


# ------------------------------------------------------------------ corrected resampled t-test


def test_corrected_resampled_ttest_against_plain_t_test():
    # Nadeau & Bengio (2003): corrected t = plain t · sqrt((1/k) / (1/k + n_test/n_train))
    d = np.array([0.012, 0.004, 0.009, -0.002, 0.015, 0.007, 0.003, 0.011, 0.006, 0.008])
    plain = stats.ttest_1samp(d, 0.0)
    result = metrics.corrected_resampled_ttest(d, n_train=900, n_test=100)
    factor = math.sqrt(0.1 / (0.1 + 100 / 900))
    assert result["t"] == pytest.approx(plain.statistic * factor, rel=1e-12)
    assert result["df"] == 9
    assert result["p_value"] == pytest.approx(2 * stats.t.sf(abs(result["t"]), 9), rel=1e-12)
    assert result["p_value"] > plain.pvalue  # the correction can only widen


def test_corrected_resampled_ttest_toy_case_by_hand():
    # d = (1, 2, 3): mean 2, s² = 1, k = 3, factor 1/3 + 1/2 = 5/6 -> t = 2 / sqrt(5/6)
    result = metrics.corrected_resampled_ttest([1.0, 2.0, 3.0], n_train=2, n_test=1)
    assert result["t"] == pytest.approx(2.0 / math.sqrt(5.0 / 6.0), rel=1e-14)
    flat = metrics.corrected_resampled_ttest([0.0, 0.0], n_train=2, n_test=1)
    assert flat["t"] is None and "undefined" in flat["note"]
    with pytest.raises(OddsmithError, match="n_test must be a positive integer, got 0"):
        metrics.corrected_resampled_ttest([1.0, 2.0], n_train=2, n_test=0)


# ------------------------------------------------------------------ summary and bad input


def test_summarise_is_json_ready_and_consistent():
    y, p = _sample(19)
    summary = metrics.summarise(y, p)
    json.dumps(summary, allow_nan=False)
    assert summary["n"] == 400 and summary["events"] == int(y.sum())
    assert summary["auc"] == pytest.approx(skm.roc_auc_score(y, p), abs=1e-12)
    assert summary["gini"] == pytest.approx(2 * summary["auc"] - 1, abs=1e-15)
    assert summary["hl_statistic"] == metrics.hosmer_lemeshow(y, p)["statistic"]
    assert summary["notes"] == []
    for key, value in summary.items():
        assert type(value) in (int, float, list), key


@pytest.mark.parametrize("seed, decimals", [(20, 2), (21, None), (22, 1)])
def test_summarise_matches_the_libraries_on_ties_and_without(seed, decimals):
    # summarise sorts once and computes AUC, KS, log loss, Brier and Hosmer–Lemeshow with numpy;
    # scikit-learn and scipy.stats are the references.
    y, p = _sample(seed, n=3_000, decimals=decimals)
    summary = metrics.summarise(y, p)
    fpr, tpr, _ = skm.roc_curve(y, p, drop_intermediate=False)
    assert summary["auc"] == pytest.approx(skm.roc_auc_score(y, p), abs=1e-13)
    assert summary["ks"] == pytest.approx(float(np.max(tpr - fpr)), abs=1e-15)
    assert summary["log_loss"] == pytest.approx(skm.log_loss(y, np.clip(p, 1e-15, 1 - 1e-15)), rel=1e-13)
    assert summary["brier"] == pytest.approx(skm.brier_score_loss(y, p), rel=1e-13)
    hl = metrics.hosmer_lemeshow(y, p)
    assert summary["hl_p_value"] == stats.chi2.sf(hl["statistic"], hl["df"])  # the same bits


def test_midranks_and_p_values_are_the_bits_of_scipy_stats():
    rng = np.random.default_rng(23)
    values = np.round(rng.normal(size=2_000), 1)  # many ties
    assert np.array_equal(ranks.midranks(values), stats.rankdata(values))
    assert np.array_equal(ranks.midranks([3, 3, 3]), stats.rankdata([3, 3, 3]))
    y, p = _sample(24)
    noisy = np.clip(p + rng.normal(scale=0.1, size=p.size), 0.0, 1.0)
    result = metrics.delong_test(y, p, noisy)
    assert result["p_value"] == 2.0 * stats.norm.sf(abs(result["z"]))
    ttest = metrics.corrected_resampled_ttest([0.01, 0.03, -0.005, 0.02, 0.012], n_train=800, n_test=200)
    assert ttest["p_value"] == 2.0 * stats.t.sf(abs(ttest["t"]), 4)
    ci = metrics.auc_confidence_interval(y, p, level=0.9)
    assert ci["lower"] == max(0.0, ci["auc"] - stats.norm.ppf(0.95) * ci["se"])


def test_metrics_never_import_the_heavy_libraries():
    # A fit job computes summarise for every fold; importing scikit-learn or scipy.stats for it
    # would cost more than the computation (see the note at the top of metrics.py).
    import subprocess
    import sys

    code = ("import sys, numpy as np\n"
            "from oddsmith.assessment import metrics\n"
            "rng = np.random.default_rng(0); p = rng.random(500); y = (rng.random(500) < p).astype(int)\n"
            "metrics.summarise(y, p); metrics.delong_test(y, p, p ** 2); metrics.auc_confidence_interval(y, p)\n"
            "metrics.corrected_resampled_ttest([0.1, 0.2, 0.4], n_train=10, n_test=5)\n"
            "print(sorted(m for m in ('sklearn', 'scipy.stats', 'statsmodels') if m in sys.modules))\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_summarise_single_class_fold_gives_none_with_notes():
    summary = metrics.summarise(np.zeros(6, dtype=int), [0.1, 0.2, 0.2, 0.3, 0.4, 0.5])
    json.dumps(summary, allow_nan=False)
    for key in ("auc", "gini", "ks", "calibration_intercept", "calibration_slope"):
        assert summary[key] is None
    assert summary["brier"] == pytest.approx(np.mean(np.square([0.1, 0.2, 0.2, 0.3, 0.4, 0.5])))
    assert any("every outcome is 0" in note for note in summary["notes"])


@pytest.mark.parametrize(
    "y, p, message",
    [
        ([0, 1, 2], [0.1, 0.2, 0.3], "y must contain only 0 and 1, found 2 at row 2"),
        ([0, 1, 1], [0.1, 1.3, 0.3], "found 1.3 at row 1"),
        ([0, 1, 1], [0.1, float("nan"), 0.3], "found nan at row 1"),
        ([0, 1], [0.1, 0.2, 0.3], "same length, got 2 and 3"),
    ],
)
def test_bad_input_names_the_value(y, p, message):
    with pytest.raises(OddsmithError, match=message):
        metrics.brier(y, p)


# ------------------------------------------------------------------ intervals


def test_bootstrap_replicates_equal_a_plain_loop_with_the_same_rows():
    # Slow reference: each replicate's rows (bootstrap_rows, the stated rule) copied out and
    # measured with summarise; the fast path works on draw counts without copying.
    y, p = _sample(3, n=500, decimals=2)
    fast = metrics.bootstrap_replicate_values(y, p, replicates=25, seed=9)
    for b in range(25):
        rows = metrics.bootstrap_rows(y, replicate=b, seed=9)
        assert y[rows].sum() == y.sum()  # stratified by outcome
        slow = metrics.summarise(y[rows], p[rows])
        for name in metrics.BOOTSTRAP_METRICS:
            assert fast[name][b] == pytest.approx(slow[name], abs=1e-9), (name, b)


def test_replicate_calibration_fits_start_at_the_sample_fit_and_end_where_a_cold_start_ends(monkeypatch):
    # The replicates' Newton steps begin at the whole sample's fit (fewer steps than from the
    # event rate); where they end must not depend on where they began.
    y, p = _sample(6, n=2_000, decimals=None)
    order = np.argsort(p, kind="stable")
    y_s, lp_s = y[order].astype(float), metrics._logit(p[order])
    start = metrics._calibration_start(y_s, lp_s)
    whole = metrics.calibration_intercept_slope(y, p)
    assert start["offset"][0] == pytest.approx(whole["intercept"], abs=1e-9)
    assert start["slope"][1] == pytest.approx(whole["slope"], abs=1e-8)
    w = np.stack([np.bincount(metrics.bootstrap_rows(y, replicate=b, seed=3), minlength=y.size)[order]
                  for b in range(12)]).astype(float)
    steps = {"cold": 0, "warm": 0}
    newton = metrics._newton_rows

    def counted(which):
        def run(state, evaluate, **options):
            def evaluate_counted(params, rows):
                steps[which] += 1
                return evaluate(params, rows)
            return newton(state, evaluate_counted, **options)
        return run

    monkeypatch.setattr(metrics, "_newton_rows", counted("cold"))
    cold = metrics._calibration_replicates(w, y_s, lp_s)
    monkeypatch.setattr(metrics, "_newton_rows", counted("warm"))
    warm = metrics._calibration_replicates(w, y_s, lp_s, start)
    np.testing.assert_allclose(warm, cold, rtol=0, atol=1e-10)
    assert steps["warm"] < steps["cold"], steps
    # one distinct prediction: no sample fit to start from, and every replicate undefined
    flat = np.full(y.size, 0.3)
    assert metrics._calibration_start(y_s, metrics._logit(flat)) is None


def test_bootstrap_in_threads_gives_the_same_bits(monkeypatch):
    # The evaluate rule shares the replicate blocks among its threads; blocks are fixed by
    # the number of rows, and each replicate has its own generator.
    monkeypatch.setattr(metrics, "_CHUNK_CELLS", 2_000)  # blocks of 4 replicates at 500 rows
    y, p = _sample(5, n=500, decimals=2)
    assert len(metrics.bootstrap_blocks(500, 30)) == 8
    alone = metrics.bootstrap_replicate_values(y, p, replicates=30, seed=4)
    for workers in (2, 3):
        shared = metrics.bootstrap_replicate_values(y, p, replicates=30, seed=4, workers=workers)
        for name in metrics.BOOTSTRAP_METRICS:
            assert np.array_equal(shared[name], alone[name], equal_nan=True), (name, workers)
    with pytest.raises(ValueError, match="workers must be an integer of at least 1"):
        metrics.bootstrap_replicate_values(y, p, replicates=30, seed=4, workers=0)


def test_percentile_interval_is_numpy_quantile_of_the_replicates():
    y, p = _sample(4, n=300, decimals=None)
    out = metrics.bootstrap_performance(y, p, replicates=200, seed=1)
    values = metrics.bootstrap_replicate_values(y, p, replicates=200, seed=1)
    low, high = np.quantile(values["ks"], [0.025, 0.975])
    assert (out["intervals"]["ks"]["lower"], out["intervals"]["ks"]["upper"]) == (low, high)
    assert out["replicates"] == 200 and out["seed"] == 1 and out["reduced"] is None
    assert out["method"] == metrics.PERCENTILE_METHOD


def test_undefined_replicates_are_counted_not_crashed_on():
    # every prediction equal: calibration slope and intercept are undefined in every replicate
    y = np.array([0, 1] * 30)
    p = np.full(60, 0.4)
    out = metrics.bootstrap_performance(y, p, replicates=50, seed=2)
    assert out["intervals"]["calibration_slope"] == {"lower": None, "upper": None, "defined": 0, "undefined": 50}
    assert out["intervals"]["auc"]["lower"] == out["intervals"]["auc"]["upper"] == 0.5
    # perfect separation in some resamples: the slope fit does not converge there
    y2 = np.array([0] * 8 + [1] * 8)
    p2 = np.array([0.1, 0.2, 0.2, 0.3, 0.3, 0.35, 0.4, 0.6, 0.45, 0.5, 0.6, 0.7, 0.7, 0.8, 0.9, 0.9])
    out2 = metrics.bootstrap_performance(y2, p2, replicates=100, seed=3)
    slope = out2["intervals"]["calibration_slope"]
    assert slope["undefined"] > 0 and slope["defined"] + slope["undefined"] == 100


def test_budget_cuts_replicates_and_switches_to_the_normal_interval():
    y, p = _sample(5, n=400, decimals=None)
    out = metrics.bootstrap_performance(y, p, replicates=1000, seed=4, max_draws=400 * 60)
    assert out["replicates"] == 60 and out["replicates_requested"] == 1000 and "budget" in out["reduced"]
    values = metrics.bootstrap_replicate_values(y, p, replicates=60, seed=4)
    estimate = metrics.brier(y, p)
    half = stats.norm.ppf(0.975) * values["brier"].std(ddof=1)
    assert out["intervals"]["brier"]["lower"] == pytest.approx(estimate - half, rel=1e-12)


def test_wilson_matches_statsmodels_proportion_confint():
    from statsmodels.stats.proportion import proportion_confint

    # statsmodels (reference library), method="wilson"
    for events, n, level in ((0, 10, 0.95), (3, 10, 0.9), (37, 120, 0.95), (120, 120, 0.99)):
        out = metrics.wilson_interval(events, n, level=level)
        low, high = proportion_confint(events, n, alpha=1 - level, method="wilson")
        assert out["lower"] == pytest.approx(low, abs=1e-15) and out["upper"] == pytest.approx(high, abs=1e-15)
    assert metrics.wilson_interval(0, 0)["rate"] is None
    with pytest.raises(OddsmithError, match="events must not exceed n"):
        metrics.wilson_interval(5, 3)


def test_interval_coverage_on_a_simulated_case():
    # Sanity, not a proof (seeded): a correctly specified logistic score, 400 rows per sample.
    # 90% percentile bootstrap of the AUC and the calibration slope, and the 90% Wald interval
    # of the calibration intercept, should each cover the population value in roughly 90% of
    # samples. (Measured while writing: AUC 0.87, slope 0.86, intercept by the outcome-
    # stratified bootstrap only 0.45, hence the Wald interval for it.)
    rng = np.random.default_rng(11)
    big_x = rng.normal(size=200_000)
    big_p = 1 / (1 + np.exp(-(-1 + big_x)))
    true_auc = metrics.auc((rng.random(big_x.size) < big_p).astype(int), big_p)
    covered, trials = {"auc": 0, "slope": 0, "intercept": 0}, 60
    for t in range(trials):
        x = rng.normal(size=400)
        p = 1 / (1 + np.exp(-(-1 + x)))
        y = (rng.random(400) < p).astype(int)
        iv = metrics.bootstrap_performance(y, p, replicates=200, seed=t, level=0.9)["intervals"]
        wald = metrics.calibration_intercept_interval(y, p, level=0.9)
        covered["auc"] += iv["auc"]["lower"] <= true_auc <= iv["auc"]["upper"]
        covered["slope"] += iv["calibration_slope"]["lower"] <= 1.0 <= iv["calibration_slope"]["upper"]
        covered["intercept"] += wald["lower"] <= 0.0 <= wald["upper"]
    for name, count in covered.items():
        assert 0.75 <= count / trials <= 0.99, (name, count)


def test_calibration_intercept_wald_se_matches_statsmodels_offset_glm():
    # statsmodels GLM (reference library): binomial, constant only, offset logit(p)
    y, p = _sample(6, n=600, decimals=None)
    lp = np.log(p) - np.log1p(-p)
    fit = sm.GLM(y, np.ones((y.size, 1)), family=sm.families.Binomial(), offset=lp).fit()
    out = metrics.calibration_intercept_interval(y, p)
    assert out["estimate"] == pytest.approx(fit.params[0], abs=1e-8)
    assert out["se"] == pytest.approx(fit.bse[0], rel=1e-6)


def test_wilson_bounds_equal_statsmodels_to_the_last_bit():
    """The written-out Wilson bounds against statsmodels' proportion_confint(method="wilson")
    (statsmodels 0.15), compared exactly: the decision stages skip importing statsmodels."""
    import itertools

    from statsmodels.stats.proportion import proportion_confint

    from oddsmith.assessment.metrics import _rate_interval

    rng = np.random.default_rng(20261202)
    cases = [(e, n) for n in (1, 2, 3, 10, 999, 250_000, 1_000_003) for e in sorted({0, 1, n // 3, n - 1, n})]
    cases += [(int(rng.integers(0, n + 1)), int(n)) for n in rng.integers(1, 10**7, 200)]
    for (events, n), level in itertools.product(cases, (0.95, 0.9, 0.99, 0.6827)):
        low, high = (float(v) for v in proportion_confint(events, n, alpha=1.0 - level, method="wilson"))
        rate = events / n
        expected = (0.0 if events == 0 else min(max(low, 0.0), rate), 1.0 if events == n else max(min(high, 1.0), rate))
        assert _rate_interval(events, n, level=level) == expected, (events, n, level)


def test_normal_bootstrap_interval_uses_the_normal_quantile_of_scipy_stats():
    """The quantile comes from scipy.special.ndtri (no scipy.stats import in the decision
    stage); it must be the very value of scipy.stats.norm.ppf, so the bounds are the same bits."""
    from scipy import stats

    values = np.random.default_rng(5).normal(0.8, 0.02, 400)
    for level in (0.95, 0.9, 0.99, 0.8):
        out = metrics.bootstrap_interval(values, estimate=0.8, level=level, method=metrics.NORMAL_METHOD)
        half = float(stats.norm.ppf(0.5 + level / 2.0)) * float(values.std(ddof=1))
        assert (out["lower"], out["upper"]) == (0.8 - half, 0.8 + half)
