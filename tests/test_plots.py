"""Figures of the model card: deterministic SVG bytes, hostile labels, every model shape,
and the ROC points against scikit-learn (the reference library)."""

from __future__ import annotations

import math
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import roc_curve

from oddsmith.errors import ArgumentError, ArtifactError
from oddsmith.io import write_json, write_parquet
from oddsmith.reporting import plots
from oddsmith.stages import figures

HOSTILE = [
    "<script>alert(1)</script>",
    '<img src="http://example.invalid/x.png">',
    "file:///etc/passwd",
    "$\\frac{a}{$ unbalanced mathtext",
    "--><script>alert(1)</script><!--",
    "x" * 300,
    "مجموعة عربية",
    "קבוצה",
    "中文组别",
]


@pytest.fixture()
def scores():
    rng = np.random.default_rng(20261202)
    y = rng.integers(0, 2, 400)
    p = np.clip(rng.normal(0.25 + 0.2 * y, 0.12), 0.001, 0.999).round(2)  # rounding creates ties
    return y, p


def _no_external_reference(svg: bytes) -> None:
    # Parsed as XML: labels are text (or XML comments), so only an element or an attribute
    # could make a renderer fetch or run something; a hostile label that spells out
    # 'href="http://…"' stays character data.
    import xml.etree.ElementTree as ET

    root = ET.fromstring(svg)
    tags = {element.tag.rsplit("}", 1)[-1] for element in root.iter()}
    assert not tags & {"image", "script", "img", "foreignObject", "a", "iframe"}, tags
    references = [value for element in root.iter() for key, value in element.attrib.items()
                  if key.rsplit("}", 1)[-1] in ("href", "src")]
    assert all(value.startswith("#") for value in references), references
    styles = " ".join(element.get("style", "") for element in root.iter())
    assert "url(" not in styles.replace("url(#", "")


def test_roc_points_match_scikit_learn_with_ties(scores):
    # scikit-learn's roc_curve is the reference implementation (docs/references.md).
    y, p = scores
    fpr, tpr = plots.roc_points(y, p)
    ref_fpr, ref_tpr, _ = roc_curve(y, p, drop_intermediate=False)
    np.testing.assert_allclose(fpr, ref_fpr, atol=1e-12)
    np.testing.assert_allclose(tpr, ref_tpr, atol=1e-12)


def test_roc_points_hand_computed():
    fpr, tpr = plots.roc_points([0, 1, 0, 1], [0.2, 0.2, 0.1, 0.9])
    assert fpr.tolist() == [0.0, 0.0, 0.5, 1.0]
    assert tpr.tolist() == [0.0, 0.5, 1.0, 1.0]


def test_every_figure_is_deterministic_svg_without_external_references(scores):
    y, p = scores
    curve = pd.DataFrame({"cutoff": np.linspace(0.01, 0.99, 50), "expected_cost_per_case": np.linspace(900, 700, 50)})
    bins = [{"mean_predicted": m, "observed_rate": m * 1.1, "ci_low": m * 0.8, "ci_high": m * 1.3, "n": 40}
            for m in (0.1, 0.2, 0.3, 0.4)]
    makers = {
        "roc": lambda: plots.roc_svg(y, p, auc=0.74, auc_low=0.7, auc_high=0.78, cutoff=0.3,
                                     operating_point=(0.3, 0.7)),
        "reliability": lambda: plots.reliability_svg(bins),
        "cost_curve": lambda: plots.cost_curve_svg(curve, adopted=0.3, bayes=0.25, interval=(0.2, 0.35),
                                                   flag_none=1040, flag_all=990),
        "score_distribution": lambda: plots.score_distribution_svg(y, p, cutoff=0.3),
    }
    for name, make in makers.items():
        first, second = make(), make()
        assert first == second, name
        assert first.startswith(b"<?xml"), name
        assert b"<dc:date>" not in first, name
        _no_external_reference(first)


def test_series_differ_by_line_style_not_only_colour():
    curve = pd.DataFrame({"cutoff": [0.1, 0.5, 0.9], "expected_cost_per_case": [900.0, 700.0, 950.0]})
    svg = plots.cost_curve_svg(curve, adopted=0.5, bayes=0.4, interval=(0.45, 0.55), flag_none=1000, flag_all=990)
    dashes = set(re.findall(rb"stroke-dasharray: ([0-9., ]+)", svg))
    assert len(dashes) >= 3, dashes  # flag none, flag all and Bayes each have their own dash pattern
    assert b"<pattern" in svg  # the bootstrap interval is hatched


def _coef_row(term, estimate, *, logit):
    row = {"term": term, "estimate": estimate, "ci_low": estimate - 0.2, "ci_high": estimate + 0.2,
           "std_error": 0.1, "z": estimate / 0.1, "p_value": 0.05, "ame": None, "ame_std_error": None,
           "odds_ratio": None, "or_ci_low": None, "or_ci_high": None}
    if logit:
        row |= {"odds_ratio": np.exp(estimate), "or_ci_low": np.exp(estimate - 0.2), "or_ci_high": np.exp(estimate + 0.2)}
    return row


@pytest.mark.parametrize("shape", ["logit", "cloglog", "penalised", "baseline"])
def test_coefficient_chart_handles_every_model_shape(shape):
    terms = ["intercept", *HOSTILE]
    model = {"candidate": "<b>cand</b>", "kind": shape, "link": "logit" if shape != "cloglog" else "cloglog",
             "coef_table": [], "coefficients": {}}
    if shape in ("logit", "cloglog"):
        model["coef_table"] = [_coef_row(t, 0.1 * i, logit=shape == "logit") for i, t in enumerate(terms)]
    elif shape == "penalised":
        model["coefficients"] = {t: 0.1 * i for i, t in enumerate(HOSTILE)}
    svg = plots.coefficients_svg(model)
    assert svg == plots.coefficients_svg(model)
    _no_external_reference(svg)


def test_coefficient_chart_of_many_terms_draws_the_largest_and_says_so(monkeypatch):
    # 86 penalised terms, most set to zero (as a lasso on ISLR Caravan leaves them): the chart
    # keeps the 40 farthest from 0 in their order, so it fits a page; the table keeps them all.
    coefficients = {f"t{i:02d}": (0.0 if i % 2 else (i - 43) / 10) for i in range(86)}
    model = {"candidate": "lasso", "kind": "l1", "coefficients": coefficients}
    fig = _drawn(monkeypatch, lambda: plots.coefficients_svg(model))
    ax = fig.axes[0]
    assert ax.get_title(loc="left") == "Terms of the selected model (lasso, l1): the 40 largest of 86 (all in the table)"
    labels = [t.get_text() for t in ax.get_yticklabels()]  # in the order given, drawn top down
    expected = sorted(coefficients, key=lambda t: -abs(coefficients[t]))[:40]
    assert labels == sorted(expected)
    assert all(coefficients[t] != 0.0 for t in labels)
    assert fig.get_figheight() < 8.0


def test_subgroup_chart_with_hostile_labels_small_groups_and_no_attributes():
    rows = [{"group": g, "adverse_impact_ratio": r, "adverse_impact_flag": r < 0.8, "flag_rate": 0.3, "too_small": False}
            for g, r in zip(HOSTILE, (0.5, 0.79, 0.8, 0.95, 1.0, 0.9, 0.85, 0.7))]
    rows.append({"group": "tiny", "adverse_impact_ratio": None, "adverse_impact_flag": None, "flag_rate": None,
                 "too_small": True})
    svg = plots.subgroups_svg({"<script>": {"kind": "sensitive", "rows": rows}})
    _no_external_reference(svg)
    assert plots.subgroups_svg({}).startswith(b"<?xml")


def test_short_label_marks_the_cut():
    assert plots.short_label("a" * 100).endswith("…")
    assert len(plots.short_label("a" * 100)) == plots.LABEL_LIMIT
    assert plots.short_label("  spaced\nlabel ") == "spaced label"


def test_the_three_figure_rules_draw_every_figure_once():
    assert figures.DECISION_FIGURES == figures.CUTOFF_FIGURES + figures.SUBGROUP_FIGURES
    assert sorted(figures.MODEL_FIGURES + figures.DECISION_FIGURES) == sorted(plots.FIGURE_NAMES)
    with pytest.raises(ValueError, match=r"missing \['coefficients'\], unknown \['roc'\]"):
        figures.run_model_figures(probability_metrics_path="unused", selected_path="unused", model_paths={},
                                  recipe_path="unused", out={"reliability": "a.svg", "roc": "b.svg"})


@pytest.mark.e2e
def test_figures_rebuild_byte_identical_in_another_process(demo_build, tmp_path):
    """The three figure stages, rerun in a fresh interpreter with another hash seed into another
    folder, write the same bytes as the workflow's figure rules."""
    run = demo_build / "results" / "lease_demo"
    candidates = sorted(p.name for p in (run / "candidates").iterdir())
    script = f"""
from oddsmith.stages.figures import (CUTOFF_FIGURES, MODEL_FIGURES, SUBGROUP_FIGURES, run_figures, run_model_figures,
                                     run_subgroup_figure)
run = {str(run)!r}
out = {str(tmp_path)!r} + "/"
run_figures(scores_path=run + "/evaluation/scores.parquet",
            probability_metrics_path=run + "/evaluation/probability_metrics.json", choice_path=run + "/threshold/choice.json",
            curve_path=run + "/threshold/cost_curve.parquet", out={{n: out + n + ".svg" for n in CUTOFF_FIGURES}},
            currency="unit")
run_subgroup_figure(subgroups_path=run + "/evaluation/subgroups.json", out={{n: out + n + ".svg" for n in SUBGROUP_FIGURES}})
run_model_figures(probability_metrics_path=run + "/evaluation/probability_metrics.json",
                  selected_path=run + "/comparison/selected.json",
                  model_paths={{c: run + "/candidates/" + c + "/model.json" for c in {candidates!r}}},
                  recipe_path=run + "/features/recipe.json", out={{n: out + n + ".svg" for n in MODEL_FIGURES}})
"""
    env = dict(os.environ, PYTHONHASHSEED="4242", SOURCE_DATE_EPOCH="1")
    subprocess.run([sys.executable, "-c", script], check=True, cwd=tmp_path, env=env, capture_output=True)
    for name in plots.FIGURE_NAMES:
        assert (tmp_path / f"{name}.svg").read_bytes() == (run / "figures" / f"{name}.svg").read_bytes(), name
    assert not list(Path(run / "figures").glob("*.part")), "no partial writes left"


@pytest.mark.parametrize("bootstrap", [None, {"cutoff_low": 0.4, "cutoff_high": None}])
def test_cost_curve_figure_without_a_bootstrap_or_with_flag_none_in_the_interval(tmp_path, scores, bootstrap):
    """costs.bootstrap: 0 stores no interval; an interval may end at "flag none" (None)."""
    y, p = scores
    write_parquet(tmp_path / "scores.parquet", pd.DataFrame({"y": y, "p": p}))
    write_parquet(tmp_path / "curve.parquet", pd.DataFrame({"cutoff": [0.2, 0.5, np.inf],
                                                            "expected_cost_per_case": [0.9, 0.7, 0.8]}))
    write_json(tmp_path / "probability.json", {"overall": {"auc": 0.7}, "auc_test_ci": {"lower": 0.65, "upper": 0.75},
                                               "candidate": "m", "n": len(y)})
    write_json(tmp_path / "choice.json", {"bootstrap": bootstrap, "adopted_cutoff": 0.5, "bayes": {"cutoff": 0.45},
                                          "cost_per_1000": {"flag_none": 800.0, "flag_all": 900.0}, "candidate": "m"})
    out = {name: tmp_path / f"{name}.svg" for name in figures.CUTOFF_FIGURES}
    figures.run_figures(scores_path=tmp_path / "scores.parquet", probability_metrics_path=tmp_path / "probability.json",
                        choice_path=tmp_path / "choice.json", curve_path=tmp_path / "curve.parquet", out=out)
    svg = out["cost_curve"].read_bytes()
    assert (b"<pattern" in svg) == (bootstrap is not None)  # the hatched interval is drawn only when there is one


@pytest.mark.parametrize("cutoff", [None, math.inf, 0.0, 0.35, 0.5, 0.999, 1.0])
def test_the_operating_point_is_the_confusion_matrix_of_apply_cutoff(scores, cutoff):
    """The figures stage counts the ROC's operating point itself (it runs beside apply_cutoff);
    it must be the same bits as 1 − specificity and sensitivity of confusion_at."""
    from oddsmith.assessment.threshold import confusion_at

    y, p = scores
    y = np.asarray(y).astype(int)
    p = np.asarray(p)
    confusion = confusion_at(y, p, cutoff)
    assert figures.operating_point(y, p, cutoff) == (1 - confusion["specificity"], confusion["sensitivity"])


def test_cutoff_figures_refuse_a_choice_made_for_another_candidate(tmp_path, scores):
    y, p = scores
    write_parquet(tmp_path / "scores.parquet", pd.DataFrame({"y": y, "p": p}))
    write_json(tmp_path / "probability.json", {"candidate": "logit", "n": len(y)})
    write_json(tmp_path / "choice.json", {"candidate": "probit"})
    with pytest.raises(ArtifactError, match="do not belong together") as caught:
        figures.run_figures(scores_path=tmp_path / "scores.parquet", probability_metrics_path=tmp_path / "probability.json",
                            choice_path=tmp_path / "choice.json", curve_path=tmp_path / "unused.parquet",
                            out={name: tmp_path / f"{name}.svg" for name in figures.CUTOFF_FIGURES})
    assert "'probit'" in str(caught.value) and "'logit'" in str(caught.value)
    assert not list(tmp_path.glob("*.svg"))


def test_calibration_intervals_and_error_bars_are_never_negative_for_any_bin():
    """Every bin size from 1 to 3,000 with 0, 1, half, all but one and all events: the
    interval lies in [0, 1] exactly, holds the observed rate, and the bars are >= 0. The raw
    Wilson bounds of statsmodels (the reference library) leave rounding residue at the ends
    (e.g. 8.7e-19 with no events) that the bars must also survive."""
    from statsmodels.stats.proportion import proportion_confint

    from oddsmith.assessment.metrics import _rate_interval

    for n in range(1, 3001):
        for events in sorted({0, 1, n // 2, n - 1, n}):
            rate = events / n
            low, high = _rate_interval(events, n)
            assert 0.0 <= low <= rate <= high <= 1.0, (n, events, low, high)
            assert (events > 0 or low == 0.0) and (events < n or high == 1.0), (n, events, low, high)
            raw = proportion_confint(events, n, alpha=0.05, method="wilson")
            bars = plots.error_bar_lengths([rate, rate], [low, raw[0]], [high, raw[1]])
            assert (bars >= 0).all(), (n, events, bars)


def test_reliability_figure_with_empty_and_full_bins_and_a_single_bin():
    from statsmodels.stats.proportion import proportion_confint

    def bin_of(n, events, p):
        low, high = proportion_confint(events, n, alpha=0.05, method="wilson")  # raw, with residue
        return {"n": n, "events": events, "mean_predicted": p, "observed_rate": events / n,
                "ci_low": float(low), "ci_high": float(high)}

    bins = [bin_of(37, 0, 0.004), bin_of(120, 3, 0.03), bin_of(9, 9, 0.97)]
    assert proportion_confint(0, 37, method="wilson")[0] > 0  # the residue this guards against
    for shape in (bins, bins[:1], bins[2:], []):
        svg = plots.reliability_svg(shape)
        assert svg.startswith(b"<?xml") and b"<svg" in svg


def _drawn(monkeypatch, make):
    """The matplotlib figure a plotting function builds (instead of its SVG), laid out."""
    captured = {}
    monkeypatch.setattr(plots, "_svg", lambda fig: captured.setdefault("fig", fig) and b"")
    make()
    fig = captured["fig"]
    fig.canvas.draw()
    return fig


def _data_points_under_legend(ax) -> int:
    legend = ax.get_legend().get_window_extent()
    inside = 0
    for line in ax.get_lines():
        if line.get_label() in ("chance", "perfect calibration"):  # reference lines cross the whole panel
            continue
        xy = ax.transData.transform(np.column_stack(line.get_data()).astype(float))
        inside += sum(legend.x0 <= x <= legend.x1 and legend.y0 <= y <= legend.y1 for x, y in xy)
    return inside


def test_roc_legend_sits_outside_the_axes(monkeypatch, scores):
    y, p = scores
    fig = _drawn(monkeypatch, lambda: plots.roc_svg(y, p, auc=0.74, auc_low=0.7, auc_high=0.78, cutoff=0.3,
                                                    operating_point=(0.3, 0.7)))
    ax = fig.axes[0]
    legend, axes = ax.get_legend().get_window_extent(), ax.get_window_extent()
    assert legend.y1 <= axes.y0 and not legend.overlaps(axes)  # below the axes: covers no part of the curve
    assert _data_points_under_legend(ax) == 0


def test_score_distribution_legend_sits_outside_the_axes(monkeypatch, scores):
    y, p = scores
    ax = _drawn(monkeypatch, lambda: plots.score_distribution_svg(y, p, cutoff=0.3)).axes[0]
    assert not ax.get_legend().get_window_extent().overlaps(ax.get_window_extent())


def test_reliability_legend_covers_no_bin(monkeypatch):
    bins = [{"mean_predicted": m, "observed_rate": m * 1.05, "ci_low": m * 0.8, "ci_high": m * 1.3, "n": 201}
            for m in (0.04, 0.07, 0.09, 0.11, 0.13, 0.15, 0.18, 0.22, 0.28, 0.45)]  # the demo's shape
    fig = _drawn(monkeypatch, lambda: plots.reliability_svg(bins))
    assert _data_points_under_legend(fig.axes[0]) == 0


def test_count_panel_only_when_the_bins_differ_in_size(monkeypatch):
    equal = [{"mean_predicted": m, "observed_rate": m, "n": n} for m, n in ((0.1, 201), (0.2, 200), (0.3, 201))]
    unequal = [{"mean_predicted": m, "observed_rate": m, "n": n} for m, n in ((0.1, 900), (0.2, 80), (0.3, 12))]
    assert plots.equal_count(equal) and not plots.equal_count(unequal)
    assert len(_drawn(monkeypatch, lambda: plots.reliability_svg(equal)).axes) == 1
    assert len(_drawn(monkeypatch, lambda: plots.reliability_svg(unequal)).axes) == 2


def test_cost_curve_is_drawn_per_1000_cases_in_the_declared_currency(monkeypatch):
    curve = pd.DataFrame({"cutoff": [0.1, 0.5, 0.9], "expected_cost_per_case": [0.9, 0.7, 0.95]})
    fig = _drawn(monkeypatch, lambda: plots.cost_curve_svg(curve, adopted=0.5, bayes=0.4, interval=None,
                                                           flag_none=1000.0, flag_all=990.0, currency="EUR"))
    ax = fig.axes[0]
    expected = next(line for line in ax.get_lines() if line.get_label() == "expected cost")
    assert expected.get_ydata().tolist() == pytest.approx([900.0, 700.0, 950.0])  # per case × 1,000
    assert ax.get_ylabel() == "expected cost per 1,000 cases (EUR)"
    assert plots.cost_unit("unit") == "cost units"


def test_coefficients_are_drawn_per_sd_of_the_design_column(monkeypatch):
    # x: estimate 0.01 per unit, training SD 100 → 1.0 per SD; z: 0.8 per unit, SD 0.5 → 0.4 per SD
    rows = [_coef_row("intercept", -1.0, logit=False), _coef_row("x", 0.01, logit=False),
            _coef_row("z", 0.8, logit=False)]
    model = {"candidate": "c", "kind": "cloglog", "link": "cloglog", "coef_table": rows}
    fig = _drawn(monkeypatch, lambda: plots.coefficients_svg(model, sds={"x": 100.0, "z": 0.5}))
    ax = fig.axes[0]
    points = sorted(float(line.get_xdata()[0]) for line in ax.get_lines() if line.get_marker() in ("o", "s"))
    assert points == pytest.approx([0.4, 1.0])
    assert "per SD of the design column" in ax.get_xlabel()
    # logit: odds ratio per SD = exp(b · SD), interval ends likewise (hand-computed)
    assert plots.per_sd_values([_coef_row("x", 0.01, logit=True)], {"x": 100.0})[0][1:] == pytest.approx(
        (np.exp(1.0), np.exp((0.01 - 0.2) * 100), np.exp((0.01 + 0.2) * 100)))


def test_a_long_line_is_drawn_from_each_columns_ends_and_extremes():
    rng = np.random.default_rng(3)
    x = np.sort(rng.random(100_000))
    y = np.cumsum(rng.normal(size=x.size))
    y[54_321] = 1e6  # a one-point spike must survive
    xs, ys = plots.envelope(x, y, columns=500)
    assert xs.size <= 4 * 500
    kept = np.flatnonzero(np.isin(x, xs))
    assert np.array_equal(x[kept], xs) and np.array_equal(y[kept], ys)  # a subsequence, in order
    column = np.minimum((x - x[0]) / (x[-1] - x[0]) * 500, 499).astype(int)
    for c in np.unique(column):
        inside = column == c
        assert y[inside].max() in ys[column[kept] == c] and y[inside].min() in ys[column[kept] == c]
    assert plots.envelope(x[:2000], y[:2000], columns=500)[0].size == 2000  # short: whole
    with pytest.raises(ArgumentError, match="sorted"):
        plots.envelope(x[::-1], y, columns=500)
    # Non-finite x (a cost curve's last cut-off, inf) is kept and does not stretch the columns.
    xs, ys = plots.envelope(np.r_[x, np.inf], np.r_[y, 0.0], columns=500)
    assert xs[-1] == np.inf and 500 <= xs.size - 1 <= 2000


def test_the_cost_curve_of_a_large_portfolio_is_drawn_thinned_with_its_minimum(monkeypatch):
    # As the threshold stage writes it: every distinct score, then inf (flag none) last.
    cutoff = np.r_[np.linspace(0, 1, 750_000), np.inf]
    cost = np.r_[0.5 + (cutoff[:-1] - 0.3) ** 2, 0.6]
    curve = pd.DataFrame({"cutoff": cutoff, "expected_cost_per_case": cost})
    fig = _drawn(monkeypatch, lambda: plots.cost_curve_svg(curve, adopted=0.3, bayes=0.3, interval=None,
                                                           flag_none=1000.0, flag_all=990.0))
    line = next(line for line in fig.axes[0].get_lines() if line.get_label() == "expected cost")
    x, y = np.asarray(line.get_xdata()), np.asarray(line.get_ydata())
    assert plots.ENVELOPE_COLUMNS < x.size <= 4 * plots.ENVELOPE_COLUMNS + 1  # thinned, one point per column or more
    assert x[-1] == np.inf and np.all(np.diff(x) > 0)
    assert y[:-1].min() == pytest.approx(500.0) and y[:-1].max() == pytest.approx(cost[:-1].max() * 1000)
    # Between kept points the curve moves by less than a column's worth of cut-off.
    assert np.diff(x[:-1]).max() <= 1.0 / plots.ENVELOPE_COLUMNS + 1e-9
