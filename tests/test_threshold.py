"""Tests for oddsmith.assessment.threshold: Elkan's cut-off, exact cost curves, constraints, bootstrap."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import stats
from sklearn.metrics import confusion_matrix

from oddsmith.assessment import threshold
from oddsmith.errors import CostError, OddsmithError

# Eight rows worked by hand below. Distinct cut-offs 0.1, 0.3, 0.4, 0.6, 0.8, 0.9, inf.
TOY_P = np.array([0.9, 0.8, 0.8, 0.6, 0.4, 0.3, 0.3, 0.1])
TOY_Y = np.array([1, 1, 0, 1, 0, 0, 1, 0])
# (cutoff, flagged, tp, fp) for "flag when p >= cutoff"
TOY_COUNTS = [
    (0.1, 8, 4, 4),
    (0.3, 7, 4, 3),
    (0.4, 5, 3, 2),
    (0.6, 4, 3, 1),
    (0.8, 3, 2, 1),
    (0.9, 1, 1, 0),
    (math.inf, 0, 0, 0),
]
FP1_FN3 = {"false_positive": 1, "false_negative": 3}


def _calibrated_sample(seed, n, a, b):
    """p ~ Beta(a, b) and y ~ Bernoulli(p): p is calibrated by construction."""
    rng = np.random.default_rng(seed)
    p = rng.beta(a, b, size=n)
    return (rng.random(n) < p).astype(int), p


def _slow_curve(y, p, costs):
    rows = []
    for t in sorted(set(p.tolist())) + [math.inf]:
        tp = fp = tn = fn = 0
        for score, outcome in zip(p, y):
            flagged = score >= t
            tp += flagged and outcome == 1
            fp += flagged and outcome == 0
            tn += (not flagged) and outcome == 0
            fn += (not flagged) and outcome == 1
        total = (
            costs["true_positive"] * tp
            + costs["false_positive"] * fp
            + costs["true_negative"] * tn
            + costs["false_negative"] * fn
        )
        rows.append((t, tp, fp, tn, fn, total / len(y)))
    return rows


# ------------------------------------------------------------------ Bayes cut-off and costs


def test_bayes_cutoff_formula():
    # Elkan, "The Foundations of Cost-Sensitive Learning", IJCAI 2001
    assert threshold.bayes_cutoff(false_positive=1, false_negative=4) == 0.2
    assert threshold.bayes_cutoff(false_positive=5, false_negative=9, true_positive=3, true_negative=1) == 0.4


@pytest.mark.parametrize(
    "costs, a, b, expected",
    [
        ({"false_positive": 1, "false_negative": 4}, 2, 5, 0.2),
        ({"false_positive": 5, "false_negative": 9, "true_positive": 3, "true_negative": 1}, 2, 3, 0.4),
    ],
)
def test_empirical_cutoff_recovers_elkan_on_calibrated_probabilities(costs, a, b, expected):
    # Elkan (2001): with calibrated p the cost-minimising rule is p >= the Bayes cut-off.
    # 200,000 simulated rows; the tolerance 0.02 is our own choice for this sample size.
    y, p = _calibrated_sample(2001, 200_000, a, b)
    result = threshold.choose_cutoff(y, p, costs=costs, bootstrap=0)
    assert result["bayes"]["cutoff"] == pytest.approx(expected, abs=1e-15)
    assert abs(result["empirical"]["cutoff"] - expected) < 0.02
    assert result["empirical"]["cost_per_1000"] <= result["bayes"]["cost_per_1000"]


@pytest.mark.parametrize(
    "kwargs, message",
    [
        ({"false_positive": 0, "false_negative": 1}, "false_positive must exceed true_negative"),
        ({"false_positive": -1, "false_negative": 1}, "false_positive must be >= 0, got -1.0"),
        ({"false_positive": 1, "false_negative": float("nan")}, "false_negative must be finite, got nan"),
        ({"false_positive": 1, "false_negative": 2, "true_negative": 3}, "false_positive=1.0, true_negative=3.0"),
    ],
)
def test_bayes_cutoff_rejects_bad_costs(kwargs, message):
    with pytest.raises(CostError, match=message):
        threshold.bayes_cutoff(**kwargs)


# ------------------------------------------------------------------ cost curve and confusion


def test_cost_curve_toy_case_by_hand():
    curve = threshold.cost_curve(TOY_Y, TOY_P, costs=FP1_FN3)
    assert list(curve.columns) == [
        "cutoff",
        "flagged",
        "tp",
        "fp",
        "tn",
        "fn",
        "flag_rate",
        "sensitivity",
        "specificity",
        "expected_cost_per_case",
    ]
    assert [tuple(r) for r in curve[["cutoff", "flagged", "tp", "fp"]].to_numpy()] == TOY_COUNTS
    # total cost = fp + 3 fn: 4, 3, 5, 4, 7, 9, 12 over 8 rows
    assert curve["expected_cost_per_case"].tolist() == [x / 8 for x in (4, 3, 5, 4, 7, 9, 12)]


@pytest.mark.parametrize("seed", [0, 1])
def test_cost_curve_matches_slow_loop(seed):
    rng = np.random.default_rng(seed)
    p = np.round(rng.random(150), 1)  # heavy ties
    y = (rng.random(150) < p).astype(int)
    costs = {"false_positive": 2.0, "false_negative": 7.0, "true_positive": 0.5, "true_negative": 0.25}
    curve = threshold.cost_curve(y, p, costs=costs)
    slow = _slow_curve(y, p, costs)
    assert len(curve) == len(slow)
    for row, (t, tp, fp, tn, fn, cost) in zip(curve.itertuples(), slow):
        assert (row.cutoff, row.tp, row.fp, row.tn, row.fn) == (t, tp, fp, tn, fn)
        assert row.expected_cost_per_case == pytest.approx(cost, rel=1e-12)


@pytest.mark.parametrize("cutoff", [0.05, 0.3, 0.31, 0.8, 1.0])
def test_confusion_at_matches_sklearn(cutoff):
    rng = np.random.default_rng(5)
    p = np.round(rng.random(200), 2)
    y = (rng.random(200) < p).astype(int)
    result = threshold.confusion_at(y, p, cutoff)
    tn, fp, fn, tp = confusion_matrix(y, (p >= cutoff).astype(int), labels=[0, 1]).ravel()
    assert (result["tn"], result["fp"], result["fn"], result["tp"]) == (tn, fp, fn, tp)
    assert result["flag_rate"] == (tp + fp) / 200


def test_confusion_at_leaves_undefined_rates_none():
    result = threshold.confusion_at([0, 0, 0], [0.2, 0.5, 0.7], None)
    json.dumps(result, allow_nan=False)
    assert result["sensitivity"] is None and result["ppv"] is None
    assert result["specificity"] == 1.0 and result["npv"] == 1.0 and result["cutoff"] is None
    with pytest.raises(
        OddsmithError, match=r"cutoff must be a number or None \(flag none\), got nan"
    ):
        threshold.confusion_at([0, 1], [0.2, 0.5], float("nan"))


def test_realised_cost_per_1000_toy_case():
    # at p >= 0.6: fp 1, fn 1 -> 1·1 + 3·1 = 4 over 8 rows
    assert threshold.realised_cost_per_1000(TOY_Y, TOY_P, 0.6, costs=FP1_FN3) == 500.0


# ------------------------------------------------------------------ choose_cutoff


def test_choose_cutoff_toy_case_by_hand():
    result = threshold.choose_cutoff(TOY_Y, TOY_P, costs=FP1_FN3, bootstrap=0)
    json.dumps(result, allow_nan=False)
    assert result["empirical"] == {
        "cutoff": 0.3,
        "flags_none": False,
        "cost_per_case": 0.375,
        "cost_per_1000": 375.0,
    }
    # Bayes cut-off 1/(1+3) = 0.25 flags the same rows as 0.3
    assert result["bayes"]["cutoff"] == 0.25
    assert result["cost_per_1000"] == {
        "adopted": 375.0,
        "flag_none": 1500.0,
        "flag_all": 500.0,
        "bayes": 375.0,
    }
    assert result["adopted"] == "empirical" and result["adopted_cutoff"] == 0.3
    assert result["confusion_at_adopted"]["fp"] == 3
    assert result["bootstrap"] is None and result["constrained"] is None
    assert result["candidates"] == 7


def test_choose_cutoff_breaks_ties_toward_the_highest_cutoff():
    # with false_negative = 2 the totals are 4, 3, 4, 3, 5, 6, 8: 0.3 and 0.6 tie at 3
    result = threshold.choose_cutoff(TOY_Y, TOY_P, costs={"false_positive": 1, "false_negative": 2}, bootstrap=0)
    assert result["empirical"]["cutoff"] == 0.6
    assert "ties go to the highest cut-off" in result["reason"]


def test_choose_cutoff_can_flag_none():
    result = threshold.choose_cutoff(
        [0, 1, 0, 1], [0.9, 0.2, 0.8, 0.1], costs={"false_positive": 100, "false_negative": 1}, bootstrap=50
    )
    json.dumps(result, allow_nan=False)
    assert result["empirical"]["flags_none"] is True
    assert result["empirical"]["cutoff"] is None
    assert result["bootstrap"]["cutoff_high"] is None  # flag none in every resample
    assert result["confusion_at_adopted"]["flag_rate"] == 0.0


def test_constrained_cutoff_toy_case():
    # at most 50% flagged allows cut-offs 0.6 and above; totals 4, 7, 9, 12 -> 0.6
    result = threshold.choose_cutoff(
        TOY_Y, TOY_P, costs=FP1_FN3, max_flag_rate=0.5, bootstrap=0, adopt="constrained"
    )
    assert result["constrained"]["cutoff"] == 0.6
    assert result["constrained"]["flag_rate"] == 0.5
    assert result["constrained"]["sensitivity"] == 0.75
    assert result["adopted_cutoff"] == 0.6
    assert result["cost_per_1000"]["adopted"] == 500.0
    assert result["reason"].startswith("constrained:") and "flag at most 50%" in result["reason"]
    empirical = threshold.choose_cutoff(TOY_Y, TOY_P, costs=FP1_FN3, max_flag_rate=0.5, bootstrap=0)
    assert "does not meet the operating constraints: it flags 87.5% (limit 50%)" in (
        empirical["reason"]
    )


def test_impossible_constraints_report_the_closest_achievable_values():
    # at <= 50% flagged the best is 0.6 (sensitivity 3/4); sensitivity 100% needs 0.3 (7/8)
    with pytest.raises(CostError) as error:
        threshold.choose_cutoff(
            TOY_Y, TOY_P, costs=FP1_FN3, max_flag_rate=0.5, min_sensitivity=1.0, bootstrap=0
        )
    assert str(error.value) == (
        "no cut-off flags <= 50% while reaching sensitivity >= 100%: at flag rate <= 50% the "
        "best sensitivity is 75% (cut-off 0.6); sensitivity >= 100% needs a flag rate of "
        "87.5% (cut-off 0.3)"
    )


@pytest.mark.parametrize(
    "kwargs, message",
    [
        ({"adopt": "lowest"}, "adopt must be one of .* got 'lowest'"),
        ({"adopt": "constrained"}, "needs max_flag_rate or min_sensitivity"),
        ({"max_flag_rate": 0}, r"max_flag_rate must be a number in \(0, 1\], got 0"),
        ({"min_sensitivity": 1.5}, r"min_sensitivity must be a number in \[0, 1\], got 1.5"),
        ({"bootstrap": -1}, "bootstrap must be a whole number >= 0, got -1"),
        ({"costs": {"false_positive": 1}}, "costs need false_positive and false_negative"),
        ({"costs": {"cost_fp": 1, "cost_fn": 2}}, "unknown cost keys .*'cost_fn', 'cost_fp'"),
    ],
)
def test_choose_cutoff_rejects_bad_options(kwargs, message):
    options = {"costs": FP1_FN3, "bootstrap": 0} | kwargs
    with pytest.raises(CostError, match=message):
        threshold.choose_cutoff(TOY_Y, TOY_P, **options)


def test_choose_cutoff_needs_both_outcomes():
    with pytest.raises(OddsmithError, match="needs both outcomes, got 0 events in 3 rows"):
        threshold.choose_cutoff([0, 0, 0], [0.1, 0.2, 0.3], costs=FP1_FN3)


def test_bootstrap_is_deterministic_for_a_seed():
    y, p = _calibrated_sample(7, 1500, 2, 5)
    p = np.round(p, 3)
    first = threshold.choose_cutoff(y, p, costs=FP1_FN3, bootstrap=200, seed=11)
    again = threshold.choose_cutoff(y, p, costs=FP1_FN3, bootstrap=200, seed=11)
    other = threshold.choose_cutoff(y, p, costs=FP1_FN3, bootstrap=200, seed=12)
    assert json.dumps(first, allow_nan=False) == json.dumps(again, allow_nan=False)
    assert first["bootstrap"] != other["bootstrap"]
    boot = first["bootstrap"]
    assert boot["cutoff_low"] <= first["empirical"]["cutoff"] <= boot["cutoff_high"]
    assert boot["cost_per_1000_low"] <= boot["cost_per_1000_high"]
    # re-choosing the cut-off in each resample can only lower that resample's cost
    assert boot["cost_per_1000_low"] <= boot["fixed_cutoff_cost_per_1000_low"]


# ------------------------------------------------------------------ bootstrap by bins


def _row_by_row_draws(y, p, costs, empirical_cutoff, resamples, seed):
    """The plain stratified bootstrap: resample rows, rebuild the whole cost curve."""
    rng = np.random.default_rng(seed)
    costs = threshold._resolve_costs(costs)
    pos, neg = np.flatnonzero(y == 1), np.flatnonzero(y == 0)
    chosen, chosen_cost, fixed_cost = [], [], []
    for _ in range(resamples):
        rows = np.concatenate([rng.choice(pos, pos.size), rng.choice(neg, neg.size)])
        curve = threshold._curve_dict(y[rows], p[rows], costs)
        best = threshold._lowest_cost_index(curve["total_cost"])
        chosen.append(curve["cutoff"][best])
        chosen_cost.append(curve["total_cost"][best])
        flag = p[rows] >= empirical_cutoff
        tp, fp = int(np.sum(flag & (y[rows] == 1))), int(np.sum(flag & (y[rows] == 0)))
        fixed_cost.append(threshold._total_cost(costs, tp, fp, neg.size - fp, pos.size - tp))
    return np.array(chosen), np.array(chosen_cost), np.array(fixed_cost)


@pytest.mark.parametrize("decimals", [None, 2])
def test_choice_from_bins_equals_the_choice_from_the_whole_cost_curve(decimals):
    """Given the same resampled rows, costing only the bin edges and the bins that can hold
    the minimum picks the same cut-off at the same cost as the whole curve (ties included)."""
    rng = np.random.default_rng(5)
    checked = 0
    for case in range(40):
        y, p = _calibrated_sample(case, int(rng.integers(20, 1500)), 2, 5)
        p = p if decimals is None else np.round(p, decimals)
        costs = threshold._resolve_costs({"false_positive": float(rng.uniform(0.5, 3)), "false_negative": float(rng.uniform(1, 8)),
                                          "true_positive": 0.25 * (case % 2)})
        curve = threshold._curve_dict(y, p, costs)
        rows = threshold._BinnedRows(y, p, int(rng.integers(1, 50)),
                                     curve["cutoff"][threshold._lowest_cost_index(curve["total_cost"])])
        pos, neg = np.flatnonzero(y == 1), np.flatnonzero(y == 0)
        for _ in range(4):
            drawn = np.concatenate([rng.choice(pos, pos.size), rng.choice(neg, neg.size)])
            full = threshold._curve_dict(y[drawn], p[drawn], costs)
            best = threshold._lowest_cost_index(full["total_cost"])
            value = np.searchsorted(-rows.values, -p[drawn])  # distinct value of each drawn row
            n_values = rows.values.size
            pos_counts = np.bincount(value[y[drawn] == 1], minlength=n_values)
            neg_counts = np.bincount(value[y[drawn] == 0], minlength=n_values)

            def counts_in(bins, pos_counts=pos_counts, neg_counts=neg_counts):
                lengths = rows.starts[bins + 1] - rows.starts[bins]
                inside = np.concatenate([np.arange(rows.starts[k], rows.starts[k + 1]) for k in bins])
                return pos_counts[inside], neg_counts[inside], lengths, inside - np.arange(inside.size)

            got, cost = threshold._pruned_choice(
                rows, costs, pos.size, neg.size, np.add.reduceat(pos_counts, rows.starts[:-1]),
                np.add.reduceat(neg_counts, rows.starts[:-1]), counts_in)
            assert (math.inf if got < 0 else rows.values[got]) == full["cutoff"][best]
            assert cost == full["total_cost"][best]
            checked += 1
    assert checked == 160


def _same_distribution(a, b):
    """p-value of a chi-squared test that two samples of a discrete value share one law
    (values seen fewer than 40 times in both samples together are pooled)."""
    values, counts = np.unique(np.concatenate([a, b]), return_counts=True)
    common = values[counts >= 40]
    table = np.array([[np.sum(s == v) for v in common] + [np.sum(~np.isin(s, common))] for s in (a, b)])
    table = table[:, table.sum(axis=0) > 0]
    return stats.chi2_contingency(table).pvalue


def test_bootstrap_by_bins_has_the_law_of_row_by_row_resampling():
    """Same data, 4,000 resamples each way: the chosen cut-off (chi-squared test), its cost
    and the cost of the fixed cut-off (two-sample Kolmogorov-Smirnov tests) have the same
    distribution at the 0.001 level; the seeds are fixed, so the test is deterministic."""
    y, p = _calibrated_sample(41, 500, 2, 5)
    p = np.round(p, 2)
    costs = threshold._resolve_costs(FP1_FN3)
    empirical = threshold.choose_cutoff(y, p, costs=costs, bootstrap=0)["empirical"]["cutoff"]
    chosen, chosen_cost, fixed_cost = threshold._bootstrap_draws(y, p, costs, empirical, 4000, 1)
    plain_chosen, plain_cost, plain_fixed = _row_by_row_draws(y, p, costs, empirical, 4000, 2)
    assert _same_distribution(chosen, plain_chosen) > 0.001
    assert stats.ks_2samp(chosen_cost, plain_cost).pvalue > 0.001
    assert stats.ks_2samp(fixed_cost, plain_fixed).pvalue > 0.001
    # the fixed cut-off's cost is a sum of independent counts: its mean and spread are known
    events, non_events = int(y.sum()), int(y.size - y.sum())
    missed, false_alarms = np.mean(p[y == 1] < empirical), np.mean(p[y == 0] >= empirical)
    assert np.mean(fixed_cost) == pytest.approx(3 * events * missed + non_events * false_alarms, rel=0.01)
    variance = 9 * events * missed * (1 - missed) + non_events * false_alarms * (1 - false_alarms)
    assert np.var(fixed_cost) == pytest.approx(variance, rel=0.1)
