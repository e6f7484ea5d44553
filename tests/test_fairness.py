"""Tests for oddsmith.assessment.fairness: the four-fifths rule in exact fractions and subgroup tables."""

from __future__ import annotations

import json
from fractions import Fraction

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import roc_auc_score

from oddsmith.assessment import fairness, metrics
from oddsmith.errors import OddsmithError

# ------------------------------------------------------------------ adverse impact


def test_uniform_guidelines_worked_example_in_counts():
    # Uniform Guidelines on Employee Selection Procedures, 29 CFR 1607.4(D), and the 1979
    # Questions & Answers: rates 60%, 45%, 48%, 51% -> ratios 0.75, 0.80, 0.85; only 45% flagged
    result = fairness.adverse_impact(
        {"w": (60, 100), "x": (45, 100), "y": (48, 100), "z": (51, 100)}
    )
    assert {g: r["ratio"] for g, r in result.items()} == {
        "w": Fraction(1),
        "x": Fraction(3, 4),
        "y": Fraction(4, 5),
        "z": Fraction(17, 20),
    }
    assert {g: r["flagged"] for g, r in result.items()} == {
        "w": False,
        "x": True,
        "y": False,
        "z": False,
    }
    assert all(r["reference_group"] == "w" for r in result.values())
    assert result["x"]["rate"] == Fraction(9, 20)


def test_uniform_guidelines_worked_example_in_floats():
    # same source, rates given as floats
    result = fairness.adverse_impact({"w": 0.60, "x": 0.45, "y": 0.48, "z": 0.51})
    assert result["y"]["ratio"] == 0.8 and result["y"]["flagged"] is False
    assert result["x"]["ratio"] == 0.75 and result["x"]["flagged"] is True
    assert isinstance(result["z"]["ratio"], float)


def test_float_rates_are_compared_exactly():
    # 0.72 / 0.90 is 0.7999999999999999 in binary floating point, yet the ratio is 4/5
    assert 0.72 / 0.90 < 0.8
    result = fairness.adverse_impact({"a": 0.90, "b": 0.72})
    assert result["b"]["flagged"] is False and result["b"]["ratio"] == 0.8


def test_exactly_four_fifths_is_not_flagged_and_just_below_is():
    # 29 CFR 1607.4(D): "less than four-fifths"
    result = fairness.adverse_impact({"a": (5, 5), "b": (4, 5), "c": (799, 1000)})
    assert result["b"]["ratio"] == Fraction(4, 5) and not result["b"]["flagged"]
    assert result["c"]["flagged"]


def test_adverse_impact_all_zero_rates_are_undefined_not_flagged():
    result = fairness.adverse_impact({"a": (0, 10), "b": (0, 20)})
    assert result["a"]["ratio"] is None and result["a"]["flagged"] is False


@pytest.mark.parametrize(
    "rates, message",
    [
        ({"a": (6, 5), "b": (1, 2)}, "group 'a': need 0 <= favourable <= total"),
        ({"a": (1, 0), "b": (1, 2)}, r"group 'a': need .* got \(1, 0\)"),
        ({"a": (1.5, 3), "b": (1, 2)}, "group 'a': counts must be"),
        ({"a": 1.2, "b": 0.5}, r"group 'a': rate must be within \[0, 1\], got 1.2"),
        ({"a": float("nan"), "b": 0.5}, "group 'a': rate must be finite, got nan"),
        ({"a": "60%", "b": 0.5}, "group 'a': rate must be a number or a count pair, got '60%'"),
        ({"a": (1, 2)}, "at least two groups"),
    ],
)
def test_adverse_impact_rejects_bad_rates(rates, message):
    with pytest.raises(OddsmithError, match=message):
        fairness.adverse_impact(rates)


# ------------------------------------------------------------------ subgroup table

# Worked by hand at cut-off 0.5, minimum group size 5.
#   A: p 0.9 0.7 0.6 0.2 0.1, y 1 0 1 0 0 -> flagged 3 (tp 2, fp 1); TPR 1, FPR 1/3;
#      favourable (not flagged) 2/5; base rate 2/5; mean p 0.5; AUC 5/6
#   B: p 0.8 0.4 0.3 0.3 0.2 0.1, y 1 1 0 0 0 0 -> flagged 1 (tp 1); TPR 1/2, FPR 0;
#      favourable 5/6; base rate 1/3; mean p 0.35; AUC 1
#   C: two rows, too small
#   A's ratio: (2/5) / (5/6) = 12/25 < 4/5 -> flagged; B is the most favoured group
TOY = pd.DataFrame(
    {
        "g": list("ABABABABABBCC"),
        "p": [0.9, 0.8, 0.7, 0.4, 0.6, 0.3, 0.2, 0.3, 0.1, 0.2, 0.1, 0.9, 0.1],
        "y": [1, 1, 0, 1, 1, 0, 0, 0, 0, 0, 0, 1, 0],
    }
)


def _toy_table(**options):
    kwargs = {"cutoff": 0.5, "min_group_size": 5} | options
    return fairness.subgroup_table(
        TOY["y"].to_numpy(), TOY["p"].to_numpy(), TOY["g"].to_numpy(), **kwargs
    )


def test_subgroup_table_toy_case_by_hand():
    rows = _toy_table()
    json.dumps(rows, allow_nan=False)
    a, b, c = rows
    assert [r["group"] for r in rows] == ["A", "B", "C"]
    assert (a["n"], a["events"], b["n"], b["events"]) == (5, 2, 6, 2)
    assert a["tpr"] == 1.0 and a["fpr"] == pytest.approx(1 / 3, abs=1e-15)
    assert b["tpr"] == 0.5 and b["fpr"] == 0.0
    assert a["flag_rate"] == 0.6 and b["flag_rate"] == pytest.approx(1 / 6, abs=1e-15)
    assert a["favourable_rate"] == 0.4 and b["favourable_rate"] == pytest.approx(5 / 6)
    assert a["auc"] == pytest.approx(5 / 6, abs=1e-15) and b["auc"] == 1.0
    assert a["calibration_in_the_large"] == pytest.approx(0.5 - 0.4, abs=1e-12)
    assert b["calibration_in_the_large"] == pytest.approx(0.35 - 1 / 3, abs=1e-12)
    assert (a["adverse_impact_numerator"], a["adverse_impact_denominator"]) == (12, 25)
    assert a["adverse_impact_ratio"] == 0.48 and a["adverse_impact_flag"] is True
    assert b["adverse_impact_ratio"] == 1.0 and b["adverse_impact_flag"] is False
    assert a["reference_group"] == b["reference_group"] == "B"
    assert a["tpr_gap"] == 0.5 and a["fpr_gap"] == pytest.approx(1 / 3, abs=1e-15)
    assert b["tpr_gap"] == 0.0 and b["fpr_gap"] == 0.0


def test_too_small_group_keeps_only_counts():
    c = _toy_table()[2]
    assert c["too_small"] is True and (c["n"], c["events"]) == (2, 1)
    for key in ("base_rate", "auc", "tpr", "fpr", "adverse_impact_ratio", "adverse_impact_flag"):
        assert c[key] is None
    assert "fewer than 5 rows" in c["notes"][0]


def test_favourable_can_be_the_flag():
    a, b, _ = _toy_table(favourable="flagged")
    # flagged shares 3/5 and 1/6: B's ratio (1/6) / (3/5) = 5/18
    assert a["reference_group"] == "A"
    assert (b["adverse_impact_numerator"], b["adverse_impact_denominator"]) == (5, 18)
    assert b["adverse_impact_flag"] is True and b["tpr_gap"] == -0.5


def test_group_without_events_is_reported_not_a_crash():
    y = np.array([1, 0, 1, 0, 0, 0, 0, 0])
    p = np.array([0.8, 0.3, 0.6, 0.2, 0.7, 0.1, 0.4, 0.2])
    groups = np.array(["x", "x", "x", "x", "y", "y", "y", "y"])
    x, z = fairness.subgroup_table(y, p, groups, cutoff=0.5, min_group_size=2)
    assert z["events"] == 0 and z["tpr"] is None and z["auc"] is None
    assert z["fpr"] == 0.25 and z["tpr_gap"] is None
    assert any("no events" in note for note in z["notes"])
    assert x["tpr"] == 1.0


def test_everyone_flagged_leaves_ratios_undefined():
    rows = _toy_table(cutoff=0.0)
    assert rows[0]["favourable_rate"] == 0.0
    assert rows[0]["adverse_impact_ratio"] is None and rows[0]["adverse_impact_flag"] is False


def test_subgroup_table_matches_direct_computation_on_random_data():
    rng = np.random.default_rng(3)
    n = 3000
    g = rng.choice(["north", "south", "east"], size=n, p=[0.5, 0.3, 0.2])
    p = np.round(rng.beta(2, 5, size=n), 3)
    y = (rng.random(n) < p).astype(int)
    rows = fairness.subgroup_table(y, p, pd.Series(g, name="region"), cutoff=0.3)
    for row in rows:
        m = g == row["group"]
        flagged = p[m] >= 0.3
        assert row["auc"] == pytest.approx(roc_auc_score(y[m], p[m]), abs=1e-12)
        assert row["tpr"] == pytest.approx(flagged[y[m] == 1].mean(), abs=1e-12)
        assert row["fpr"] == pytest.approx(flagged[y[m] == 0].mean(), abs=1e-12)
        assert row["favourable_rate"] == pytest.approx(1 - flagged.mean(), abs=1e-12)
    reference = max(rows, key=lambda r: r["favourable_rate"])
    for row in rows:
        assert row["adverse_impact_ratio"] == pytest.approx(
            row["favourable_rate"] / reference["favourable_rate"], rel=1e-12
        )


def test_single_group_raises():
    with pytest.raises(
        OddsmithError, match="sensitive attribute 'sex' has a single group 'A'; nothing to compare"
    ):
        fairness.subgroup_table([0, 1], [0.2, 0.7], pd.Series(["A", "A"], name="sex"), cutoff=0.5)
    with pytest.raises(OddsmithError, match="attribute 'x' has a single group 'A'"):
        fairness.subgroup_table([0, 1], [0.2, 0.7], ["A", "A"], cutoff=0.5, attribute="x")


@pytest.mark.parametrize(
    "kwargs, message",
    [
        ({"groups": ["A", None, "B"]}, "'group' has 1 missing values .first at row 1."),
        ({"groups": ["A", "B"]}, "groups for 'group' has 2 rows, y has 3"),
        ({"cutoff": float("nan")}, "cutoff must be a number or None"),
        ({"min_group_size": 0}, "min_group_size must be a positive integer, got 0"),
        ({"favourable": "approved"}, "favourable must be one of .* got 'approved'"),
    ],
)
def test_subgroup_table_rejects_bad_input(kwargs, message):
    args = {"groups": ["A", "B", "B"], "cutoff": 0.5} | kwargs
    groups = args.pop("groups")
    with pytest.raises(OddsmithError, match=message):
        fairness.subgroup_table([0, 1, 0], [0.2, 0.7, 0.4], groups, **args)


# ------------------------------------------------------------------ the two halves


def test_summaries_then_decisions_equal_the_whole_table():
    """The pipeline keeps the cut-off-free half (evaluate) and adds the decision half
    (apply_cutoff); together they give exactly the one-pass table, at every cut-off."""
    rng = np.random.default_rng(8)
    n = 2000
    g = rng.choice(["a", "b", "c", "tiny"], size=n, p=[0.5, 0.3, 0.19, 0.01])
    p = np.round(rng.beta(2, 5, size=n), 3)
    y = (rng.random(n) < p).astype(int)
    summaries = fairness.group_summaries(y, p, g, min_group_size=50, attribute="band")
    assert [s["group"] for s in summaries] == ["a", "b", "c", "tiny"]
    assert all("tpr" not in s and "adverse_impact_ratio" not in s for s in summaries)
    frozen = json.dumps(summaries, sort_keys=True)
    for cutoff in (None, 0.0, 0.2, 0.31, 0.9):
        for favourable in ("not_flagged", "flagged"):
            halves = fairness.add_decisions(json.loads(frozen), y, p, g, cutoff=cutoff, favourable=favourable)
            whole = fairness.subgroup_table(y, p, g, cutoff=cutoff, min_group_size=50, favourable=favourable)
            assert json.dumps(halves, sort_keys=True) == json.dumps(whole, sort_keys=True)
    assert json.dumps(summaries, sort_keys=True) == frozen, "the summaries are not modified"


def test_decisions_refuse_summaries_of_other_rows():
    y, p, g = TOY["y"].to_numpy(), TOY["p"].to_numpy(), TOY["g"].to_numpy()
    summaries = fairness.group_summaries(y, p, g, min_group_size=2, attribute="g")
    with pytest.raises(OddsmithError, match=r"group summaries of 'g' do not match the rows.*\('A', 5, 2\)"):
        fairness.add_decisions(summaries, y[1:], p[1:], g[1:], cutoff=0.5, attribute="g")
    relabelled = np.where(g == "C", "D", g)
    with pytest.raises(OddsmithError, match="do not match the rows"):
        fairness.add_decisions(summaries, y, p, relabelled, cutoff=0.5, attribute="g")
    with pytest.raises(OddsmithError, match="cutoff must be a number or None"):
        fairness.add_decisions(summaries, y, p, g, cutoff="0.5", attribute="g")


# ------------------------------------------------------------------ numeric attributes in bands


def test_band_labels_and_edges_by_hand():
    from oddsmith.assessment.fairness import attribute_groups, band_labels

    assert band_labels([30, 45, 60]) == ["below 30", "30 to <45", "45 to <60", "60 and over"]
    assert band_labels([0.5]) == ["below 0.5", "0.5 and over"]
    ages = pd.Series([18, 29.9, 30, 44, 45, 59, 60, 90])
    # a band holds its lower edge: 30 is in "30 to <45", 60 in "60 and over"
    assert attribute_groups(ages, bands=[30, 45, 60]).tolist() == [
        "below 30", "below 30", "30 to <45", "30 to <45", "45 to <60", "45 to <60", "60 and over", "60 and over"]


def test_bands_feed_the_subgroup_table():
    from oddsmith.assessment.fairness import attribute_groups, group_summaries

    ages = pd.Series([25, 35, 50, 70] * 50)
    y = np.array([0, 1] * 100)
    p = np.linspace(0.05, 0.95, 200)
    rows = group_summaries(y, p, attribute_groups(ages, bands=[30, 45, 60]), min_group_size=10, attribute="age")
    assert [r["group"] for r in rows] == ["30 to <45", "45 to <60", "60 and over", "below 30"]
    assert [r["n"] for r in rows] == [50, 50, 50, 50]


def test_blank_cells_take_the_declared_group_label():
    import pandas as pd

    from oddsmith.assessment.fairness import attribute_groups

    labels = attribute_groups(pd.Series(["a", None, "b"]), blanks="not stated")
    assert labels.tolist() == ["a", "not stated", "b"]
    banded = attribute_groups(pd.Series([20.0, None, 50.0]), bands=[30], blanks="not stated")
    assert banded.tolist() == ["below 30", "not stated", "30 and over"]


def test_group_comparison_replicates_equal_a_plain_loop():
    # Slow reference: copy each replicate's rows (metrics.bootstrap_rows) and count by hand.
    from oddsmith.assessment import metrics as m

    rng = np.random.default_rng(8)
    n = 400
    labels = rng.choice(np.array(["a", "b", "c"]), size=n)
    p = rng.random(n)
    y = (rng.random(n) < p).astype(int)
    flagged = p >= 0.6
    fast = fairness.group_comparison_replicates(y, flagged, labels, ["a", "b", "c"], "b", replicates=20, seed=4)
    for b in range(20):
        rows = m.bootstrap_rows(y, replicate=b, seed=4)
        yy, ff, gg = y[rows], flagged[rows], labels[rows]

        def rates(g):
            inside = gg == g
            return ((~ff & inside).sum() / inside.sum(), (ff & inside & (yy == 1)).sum() / (inside & (yy == 1)).sum(),
                    (ff & inside & (yy == 0)).sum() / (inside & (yy == 0)).sum())

        ref = rates("b")
        for g in ("a", "b", "c"):
            fav, tpr, fpr = rates(g)
            assert fast[g]["adverse_impact_ratio"][b] == pytest.approx(fav / ref[0], abs=1e-12)
            assert fast[g]["tpr_gap"][b] == pytest.approx(tpr - ref[1], abs=1e-12)
            assert fast[g]["fpr_gap"][b] == pytest.approx(fpr - ref[2], abs=1e-12)


def test_one_pass_over_the_replicates_gives_each_attributes_own_replicates():
    """Two attributes counted from one drawing of each replicate equal each counted alone
    (the slow reference above checks the one-attribute case), a group left out included."""
    rng = np.random.default_rng(9)
    n = 500
    region, band = rng.choice(np.array(["n", "s", "e"]), size=n), rng.choice(np.array(["young", "old", "tiny"]), size=n)
    p = rng.random(n)
    y, flagged = (rng.random(n) < p).astype(int), p >= 0.55
    both = fairness.comparison_replicates(y, flagged, {"region": (region, ["n", "s", "e"], "s"),
                                                       "band": (band, ["young", "old"], "old")}, replicates=15, seed=3)
    alone = {"region": fairness.group_comparison_replicates(y, flagged, region, ["n", "s", "e"], "s", replicates=15, seed=3),
             "band": fairness.group_comparison_replicates(y, flagged, band, ["young", "old"], "old", replicates=15, seed=3)}
    for name, groups in alone.items():
        for group, comparisons in groups.items():
            for key, values in comparisons.items():
                np.testing.assert_array_equal(both[name][group][key], values)


def test_attributes_counted_in_several_passes_give_the_same_replicates(monkeypatch):
    """Attributes whose groups multiply beyond MAX_JOINT_GROUPS are counted in further passes
    over each replicate; the counts, and so every comparison, are the same as in one pass.
    Blank labels (None) form a group of their own, as in one pass."""
    rng = np.random.default_rng(12)
    n = 600
    region = rng.choice(np.array(["n", "s", "e", "w"]), size=n)
    band = rng.choice(np.array(["young", "old", None], dtype=object), size=n)
    kind = rng.choice(np.array(["x", "y"]), size=n)
    p = rng.random(n)
    y, flagged = (rng.random(n) < p).astype(int), p >= 0.5
    plan = {"region": (region, ["n", "s", "e"], "s"), "band": (band, ["young", "old", None], "old"),
            "kind": (kind, ["x", "y"], "x")}
    one_pass = fairness.comparison_replicates(y, flagged, plan, replicates=12, seed=5)
    assert len(fairness._joint_batches({k: fairness._group_of_rows(v[0], v[1]) for k, v in plan.items()})) == 1
    monkeypatch.setattr(fairness, "MAX_JOINT_GROUPS", 5)  # 4 region numbers, then 4 band, then 3 kind
    assert len(fairness._joint_batches({k: fairness._group_of_rows(v[0], v[1]) for k, v in plan.items()})) == 3
    passes = fairness.comparison_replicates(y, flagged, plan, replicates=12, seed=5)
    for name, groups in one_pass.items():
        for group, comparisons in groups.items():
            for key, values in comparisons.items():
                np.testing.assert_array_equal(passes[name][group][key], values)
    alone = fairness.group_comparison_replicates(y, flagged, band, ["young", "old", None], "old", replicates=12, seed=5)
    for group, comparisons in alone.items():
        for key, values in comparisons.items():
            np.testing.assert_array_equal(one_pass["band"][group][key], values)


def test_replicates_shared_among_threads_are_the_same_bits(monkeypatch):
    # apply_cutoff hands its threads to comparison_replicates; blocks of replicates are fixed
    # by the number of rows and every replicate has its own generator.
    from oddsmith.assessment import metrics

    monkeypatch.setattr(metrics, "_CHUNK_CELLS", 2_000)  # blocks of 4 replicates at 500 rows
    rng = np.random.default_rng(10)
    n = 500
    region = rng.choice(np.array(["n", "s", "e"]), size=n)
    p = rng.random(n)
    y, flagged = (rng.random(n) < p).astype(int), p >= 0.5
    plan = {"region": (region, ["n", "s", "e"], "s")}
    alone = fairness.comparison_replicates(y, flagged, plan, replicates=30, seed=8)
    for workers in (2, 3):
        shared = fairness.comparison_replicates(y, flagged, plan, replicates=30, seed=8, workers=workers)
        for group, comparisons in alone["region"].items():
            for key, values in comparisons.items():
                np.testing.assert_array_equal(shared["region"][group][key], values)
    with pytest.raises(ValueError, match="workers must be an integer of at least 1"):
        fairness.comparison_replicates(y, flagged, plan, replicates=30, seed=8, workers=0)


def test_add_intervals_wilson_rates_and_undefined_replicates_counted():
    from statsmodels.stats.proportion import proportion_confint

    # group "z" has only 3 events: some replicates draw none of them, so its TPR gap is
    # undefined there; they are counted, not crashed on.
    y = np.array([1] * 40 + [0] * 160 + [1] * 3 + [0] * 197)
    groups = np.array(["w"] * 200 + ["z"] * 200)
    p = np.concatenate([np.linspace(0, 1, 200), np.linspace(0, 1, 200)])
    rows = fairness.subgroup_table(y, p, groups, cutoff=0.5, min_group_size=50)
    out = fairness.add_intervals(rows, y, p, groups, cutoff=0.5, bootstrap={
        "replicates": 200, "seed": 1, "method": metrics.PERCENTILE_METHOD})
    z = next(r for r in out if r["group"] == "z")
    flagged_z = int((p[200:] >= 0.5).sum())
    low, high = proportion_confint(flagged_z, 200, alpha=0.05, method="wilson")  # statsmodels reference
    assert z["intervals"]["flag_rate"]["lower"] == pytest.approx(low) and z["intervals"]["flag_rate"]["upper"] == pytest.approx(high)
    gap = z["intervals"]["tpr_gap"]
    assert gap["defined"] + gap["undefined"] == 200 and gap["undefined"] > 0
    assert "intervals" not in rows[0]  # the input rows are not modified
