"""Tests for the apply_cutoff stage: the adopted cut-off applied to the test scores that the
evaluate stage wrote, without scoring the test part again."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from oddsmith.artifacts import evaluation_at_cutoff
from oddsmith.assessment import fairness, metrics
from oddsmith.assessment.threshold import choose_cutoff
from oddsmith.errors import ArtifactError
from oddsmith.io import read_json, read_parquet, write_json, write_parquet
from oddsmith.stages.apply_cutoff import run_apply_cutoff

COSTS = {"false_positive": 1.0, "false_negative": 4.5, "true_positive": 0.0, "true_negative": 0.0}  # Bayes cut-off 1/5.5


def _artifacts(folder, *, n=3000, seed=4):
    """Test scores and cut-off-free metrics as the evaluate stage writes them, and a choice."""
    rng = np.random.default_rng(seed)
    p = np.round(rng.beta(2, 6, size=n), 4)
    y = (rng.random(n) < p).astype(int)
    region = rng.choice(["east", "north", "west"], size=n)
    period = rng.choice(["2025Q3", "2025Q4"], size=n)
    scores = pd.DataFrame({"id": [f"r{i}" for i in range(n)], "y": y, "p": p, "period": period,
                           fairness.GROUP_COLUMN_PREFIX + "region": region})
    periods = [{"period": q, "n": int((period == q).sum())} for q in ("2025Q3", "2025Q4")]
    evaluation = {"candidate": "logit", "n": n, "events": int(y.sum()), "overall": metrics.summarise(y, p),
                  "auc_test_ci": {k: v for k, v in metrics.auc_confidence_interval(y, p).items() if k != "auc"},
                  "periods": periods, "period_unit": "quarter",
                  "subgroups": {"min_group_size": 100, "attributes": {"region": {
                      "kind": "segments", "used_as_feature": False,
                      "rows": fairness.group_summaries(y, p, region, min_group_size=100, attribute="region")}}}}
    choice = choose_cutoff(y, p, costs=COSTS, bootstrap=0) | {"candidate": "logit"}
    paths = {"scores_path": folder / "scores.parquet", "probability_metrics_path": folder / "probability.json",
             "choice_path": folder / "choice.json"}
    write_parquet(paths["scores_path"], scores)
    write_json(paths["probability_metrics_path"], evaluation)
    write_json(paths["choice_path"], choice)
    outputs = {"out_cutoff_metrics": folder / "out" / "cutoff_metrics.json", "out_subgroups": folder / "out" / "subgroups.json",
               "out_predictions": folder / "out" / "predictions.parquet"}
    return paths, outputs, (y, p, region, period, choice)


def test_decision_figures_come_from_the_scores_and_the_choice(tmp_path):
    paths, outputs, (y, p, region, period, choice) = _artifacts(tmp_path)
    run_apply_cutoff(**paths, **outputs)
    result, subgroups = read_json(outputs["out_cutoff_metrics"]), read_json(outputs["out_subgroups"])
    cutoff = choice["adopted_cutoff"]
    flag = p >= cutoff
    assert result["cutoff"] == cutoff and result["adopted"] == "empirical"
    c = result["confusion"]
    assert (c["tp"], c["fp"], c["fn"], c["tn"]) == (int(np.sum(flag & (y == 1))), int(np.sum(flag & (y == 0))),
                                                    int(np.sum(~flag & (y == 1))), int(np.sum(~flag & (y == 0))))
    assert result["cost_per_1000"] == pytest.approx(1000 * (c["fp"] + 4.5 * c["fn"]) / len(y), rel=1e-12)
    # the cut-off-free metrics stay in evaluate's file; the reader's join passes them through unchanged
    assert "overall" not in result and result["candidate"] == "logit"
    joined = evaluation_at_cutoff(read_json(paths["probability_metrics_path"]), result)
    assert joined["overall"] == json.loads(json.dumps(metrics.summarise(y, p))) and joined["cutoff"] == cutoff
    assert "subgroups" not in joined and joined["period_unit"] == "quarter"
    assert {row["mark"] for row in result["cutoff_table"]} >= {"adopted", "Bayes"}
    for row in joined["periods"]:
        assert row["flag_rate"] == pytest.approx(flag[period == row["period"]].mean(), abs=1e-15)
        assert row["n"] == int((period == row["period"]).sum())
    whole = fairness.subgroup_table(y, p, region, cutoff=cutoff, min_group_size=100, attribute="region")
    rows = subgroups["attributes"]["region"]["rows"]
    assert [{k: v for k, v in r.items() if k != "intervals"} for r in rows] == json.loads(json.dumps(whole))
    # no bootstrap in this evaluation: Wilson intervals only, none for the comparisons
    assert all(r["intervals"]["adverse_impact_ratio"] is None for r in rows if not r["too_small"])
    assert subgroups["intervals"]["comparisons"] is None
    assert subgroups["attributes"]["region"]["kind"] == "segments" and subgroups["min_group_size"] == 100
    predictions = read_parquet(outputs["out_predictions"])
    assert predictions["flagged"].tolist() == flag.astype(int).tolist()
    assert predictions["id"].tolist()[:2] == ["r0", "r1"]


@pytest.mark.parametrize("damage, message", [
    (lambda s, e, c: c.update(candidate="probit"), "threshold chosen for 'probit', test part scored with 'logit'"),
    (lambda s, e, c: e.update(n=5), "scores have 3000 rows, the evaluation counts 5"),
    (lambda s, e, c: s.pop("period"), "scores lack column 'period'"),
    (lambda s, e, c: s.pop(fairness.GROUP_COLUMN_PREFIX + "region"), "scores lack column 'group:region'"),
])
def test_artifacts_that_do_not_belong_together_are_refused(tmp_path, damage, message):
    paths, outputs, _ = _artifacts(tmp_path)
    scores = read_parquet(paths["scores_path"])
    evaluation, choice = read_json(paths["probability_metrics_path"]), read_json(paths["choice_path"])
    columns = {name: scores[name] for name in scores.columns}
    damage(columns, evaluation, choice)
    write_parquet(paths["scores_path"], pd.DataFrame(columns))
    write_json(paths["probability_metrics_path"], evaluation)
    write_json(paths["choice_path"], choice)
    with pytest.raises(ArtifactError, match="do not belong together") as caught:
        run_apply_cutoff(**paths, **outputs)
    assert message in str(caught.value)
    assert not (tmp_path / "out").exists(), "nothing is written"


def test_periods_that_differ_from_the_evaluation_are_refused(tmp_path):
    paths, outputs, _ = _artifacts(tmp_path)
    evaluation = read_json(paths["probability_metrics_path"])
    evaluation["periods"][1]["period"] = "2026Q1"
    write_json(paths["probability_metrics_path"], evaluation)
    with pytest.raises(ArtifactError, match="the scores' periods do not match the evaluation's"):
        run_apply_cutoff(**paths, **outputs)
    assert not (tmp_path / "out").exists()


def test_outcome_maturity_counts_rows_whose_window_had_not_closed():
    from oddsmith.stages.evaluate import outcome_maturity

    # hand-computed: extraction 2025-12-31 (the last date), 6-month window → matured through
    # 2025-06-30; test rows dated 2025-07-01 and 2025-12-31 are not matured, 2025-06-30 is.
    dates = ["2025-01-15", "2025-06-30", "2025-06-30", "2025-07-01", "2025-12-31"]
    parts = ["train", "train", "test", "test", "test"]
    out = outcome_maturity(dates, parts, window_months=6, extraction_date=None)
    assert out["matured_through"] == "2025-06-30" and out["extraction_date"] == "2025-12-31"
    assert out["parts"]["test"] == {"rows": 3, "immature_rows": 2, "first_immature_date": "2025-07-01"}
    assert out["parts"]["train"]["immature_rows"] == 0 and out["test_matured"] is False
    later = outcome_maturity(dates, parts, window_months=6, extraction_date="2026-07-01")
    assert later["test_matured"] and later["extraction_date_source"] == "config data.extraction_date"
    assert outcome_maturity(dates, parts, window_months=None, extraction_date=None) is None


def test_joining_the_two_evaluation_files_refuses_files_of_different_runs():
    """Hand-made records: the join adds the cut-off keys and each period's flag rate, and
    refuses a candidate or period mismatch, naming both sides."""
    ci = {"lower": 0.6, "upper": 0.9, "level": 0.95, "method": "DeLong"}
    probability = {"candidate": "logit", "n": 4, "overall": {"auc": 0.75}, "auc_test_ci": ci, "subgroups": {"attributes": {}},
                   "periods": [{"period": "2025Q3", "n": 2}, {"period": "2025Q4", "n": 2}]}
    at_cutoff = {"candidate": "logit", "n": 4, "cutoff": 0.5, "adopted": "empirical", "confusion": {"tp": 1},
                 "cost_per_1000": 250.0, "cutoff_table": [],
                 "period_flag_rates": [{"period": "2025Q3", "flag_rate": 0.5}, {"period": "2025Q4", "flag_rate": 0.0}]}
    joined = evaluation_at_cutoff(probability, at_cutoff)
    assert joined == {"candidate": "logit", "n": 4, "overall": {"auc": 0.75}, "auc_test_ci": ci, "auc_interval": ci,
                      "cutoff": 0.5, "adopted": "empirical",
                      "confusion": {"tp": 1}, "cost_per_1000": 250.0, "cutoff_table": [],
                      "periods": [{"period": "2025Q3", "n": 2, "flag_rate": 0.5},
                                  {"period": "2025Q4", "n": 2, "flag_rate": 0.0}]}
    with pytest.raises(ArtifactError) as info:
        evaluation_at_cutoff(probability | {"candidate": "probit"}, at_cutoff | {"period_flag_rates": None})
    message = str(info.value)
    assert "probability metrics of 'probit', cut-off metrics of 'logit'" in message
    assert "the period rows of the two files differ" in message
