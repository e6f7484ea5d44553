"""The flexible challenger: the candidates' own folds, deterministic trees, the gap and its
interval by hand, its caveat, no pickled model, and the card's challenger paragraph."""

from __future__ import annotations

import json
import math
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from oddsmith import artifacts
from oddsmith.config import check_config
from oddsmith.errors import ArtifactError, ConfigError
from oddsmith.fitting import challenger
from oddsmith.fitting.cross_validation import cross_validate
from oddsmith.reporting import card, card_findings, card_loader
from oddsmith.stages import challenger as challenger_stage

ROOT = Path(__file__).resolve().parent.parent
RUN = Path("results") / "lease_demo"
SETTINGS = {"enabled": True, "max_iter": 60, "learning_rate": 0.1, "max_leaf_nodes": 15, "seed": 1}


def _interaction_data(n=1200, seed=5):
    """Invented rows whose outcome depends on the sign of x1·x2 only (no main effect):
    a main-effects logit cannot see it, trees can."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, 3))
    y = (rng.random(n) < np.where(x[:, 0] * x[:, 1] > 0, 0.75, 0.25)).astype(int)
    return np.ascontiguousarray(x), y


def _folds(y, k=4, repeats=1, seed=0):
    from sklearn.model_selection import StratifiedKFold

    columns = {}
    for r in range(repeats):
        fold = np.empty(len(y), dtype=np.int64)
        split = StratifiedKFold(k, shuffle=True, random_state=seed + r).split(np.zeros(len(y)), y)
        for i, (_, valid) in enumerate(split):
            fold[valid] = i
        columns["fold" if r == 0 else f"fold_r{r + 1}"] = fold
    return pd.DataFrame(columns)


# ---------------------------------------------------------------------------------------------
# fitting on the given folds


def test_trees_use_exactly_the_given_folds_and_are_deterministic():
    x, y = _interaction_data()
    folds = _folds(y, k=4, repeats=2)
    oof, per_fold = challenger.cross_validate_trees(x, y, folds, settings=SETTINGS, threads=1)
    assert [(f["repeat"], f["fold"]) for f in per_fold] == [(r, k) for r in (1, 2) for k in range(4)]
    for f in per_fold:
        column = "fold" if f["repeat"] == 1 else f"fold_r{f['repeat']}"
        size = int((folds[column] == f["fold"]).sum())
        assert (f["n"], f["n_train"]) == (size, len(y) - size)
    assert set(oof) == {"p", "p_r2"} and all(np.isfinite(p).all() for p in oof.values())
    again, _ = challenger.cross_validate_trees(x, y, folds, settings=SETTINGS, threads=2)
    for name in oof:
        assert np.array_equal(oof[name], again[name]), "two runs (1 and 2 threads) give identical predictions"


def test_a_fold_prediction_uses_only_the_other_folds():
    x, y = _interaction_data(n=400)
    folds = _folds(y, k=4)
    oof, _ = challenger.cross_validate_trees(x, y, folds, settings=SETTINGS)
    y_changed = y.copy()
    first = folds["fold"].to_numpy() == 0
    y_changed[first] = 1 - y_changed[first]  # labels of fold 0 cannot move fold 0's predictions
    changed, _ = challenger.cross_validate_trees(x, y_changed, folds, settings=SETTINGS)
    assert np.array_equal(oof["p"][first], changed["p"][first])
    assert not np.array_equal(oof["p"][~first], changed["p"][~first])


@pytest.mark.parametrize("block", [2, 5, 32_768])
def test_training_rows_are_lent_exactly_and_put_back(monkeypatch, block):
    # Blocks of 2 and 5 rows make the forward and backward moves cross many block borders.
    monkeypatch.setattr(challenger, "ROW_BLOCK", block)
    x = np.random.default_rng(3).normal(size=(23, 4))
    before = x.copy()
    valid = np.zeros(23, dtype=bool)
    valid[[0, 4, 5, 6, 13, 22]] = True
    with challenger.training_rows_first(x, valid) as (train, held_out):
        assert np.shares_memory(train, x) and train.flags["C_CONTIGUOUS"], "a view, not a copy"
        assert np.array_equal(train, before[~valid]) and np.array_equal(held_out, before[valid])
    assert np.array_equal(x, before)
    with pytest.raises(RuntimeError), challenger.training_rows_first(x, valid):
        raise RuntimeError("a failing fit")
    assert np.array_equal(x, before), "rows go back also when the body raised"


def test_trees_on_the_lent_rows_equal_trees_on_a_copy(monkeypatch):
    from sklearn.ensemble import HistGradientBoostingClassifier

    monkeypatch.setattr(challenger, "ROW_BLOCK", 97)
    x, y = _interaction_data(n=700)
    folds = _folds(y, k=4)
    before = x.copy()
    oof, _ = challenger.cross_validate_trees(x, y, folds, settings=SETTINGS)
    assert np.array_equal(x, before)
    fold = folds["fold"].to_numpy()
    for k in range(4):
        valid = fold == k
        model = HistGradientBoostingClassifier(**challenger.estimator_settings(SETTINGS)).fit(x[~valid], y[~valid])
        assert np.array_equal(oof["p"][valid], model.predict_proba(x[valid])[:, 1]), f"fold {k}: bit for bit"


def test_estimator_settings_come_from_the_config_without_early_stopping():
    assert challenger.estimator_settings(SETTINGS) == {
        "max_iter": 60, "learning_rate": 0.1, "max_leaf_nodes": 15, "early_stopping": False, "random_state": 1}


# ---------------------------------------------------------------------------------------------
# the gap


def _cv(values, metric="log_loss", n=10, n_train=40):
    return {"folds": [{"repeat": 1, "fold": k, "n": n, "n_train": n_train, metric: v} for k, v in enumerate(values)]}


def test_gap_and_its_interval_by_hand():
    # Fold log losses: selected 0.50, 0.52, 0.48; challenger 0.49, 0.50, 0.47.
    # Differences selected − challenger: 0.01, 0.02, 0.01; mean 0.013333; sample variance 3.3333e-5;
    # Nadeau & Bengio factor 1/3 + 10/40 = 0.583333; SE = sqrt(0.583333 · 3.3333e-5) = 0.00440959;
    # t(2 df, 0.975) = 4.302653 (table value); half-width 0.0189730.
    gap = challenger.gap_interval(_cv([0.50, 0.52, 0.48]), _cv([0.49, 0.50, 0.47]), "log_loss")
    assert gap["advantage"] == pytest.approx(0.0133333, abs=1e-7)
    assert gap["standard_error"] == pytest.approx(0.00440959, abs=1e-8)
    assert gap["lower"] == pytest.approx(0.0133333 - 0.0189730, abs=1e-6)
    assert gap["upper"] == pytest.approx(0.0133333 + 0.0189730, abs=1e-6)
    assert gap["relative"] == pytest.approx(0.0133333 / 0.50, abs=1e-7)
    assert gap["df"] == 2 and gap["better"] == "lower"
    assert not challenger.large_gap(gap), "the interval includes 0"


def test_auc_gap_counts_higher_as_better():
    gap = challenger.gap_interval(_cv([0.70, 0.72, 0.71], "auc"), _cv([0.75, 0.76, 0.74], "auc"), "auc")
    assert gap["advantage"] == pytest.approx(0.04, abs=1e-12)  # mean of 0.05, 0.04, 0.03
    assert gap["lower"] < gap["advantage"] < gap["upper"]


def test_large_gap_needs_an_interval_above_zero_and_more_than_two_percent():
    assert challenger.large_gap({"lower": 0.001, "relative": 0.021})
    assert not challenger.large_gap({"lower": 0.001, "relative": 0.019})
    assert not challenger.large_gap({"lower": -0.001, "relative": 0.10})


def test_trees_beat_a_main_effects_logit_on_an_interaction_and_the_gap_is_large():
    x, y = _interaction_data()
    folds = _folds(y, k=5)
    _, logit_folds = cross_validate(x, ["x1", "x2", "x3"], y, folds, kind="logit", options={}, seed=0)
    _, tree_folds = challenger.cross_validate_trees(x, y, folds, settings=SETTINGS)
    gap = challenger.gap_interval({"folds": logit_folds}, {"folds": tree_folds}, "log_loss")
    assert gap["lower"] > 0 and gap["relative"] > 0.1, gap
    assert challenger.large_gap(gap)


def _gap_inputs(tmp_path, *, selected="m", folds_name="challenger"):
    from oddsmith.io import write_json

    def folds(values):  # AUC undefined on every fold (single-class folds): no AUC gap to state
        return [f | {"auc": None} for f in _cv(values)["folds"]]

    record = {"candidate": folds_name, "status": "ok", "row": {"candidate": folds_name},
              "folds": folds([0.49, 0.50, 0.47])}
    write_json(tmp_path / "folds.json", record)
    write_json(tmp_path / "m_cv.json", {"candidate": "m", "status": "ok", "folds": folds([0.50, 0.52, 0.48])})
    write_json(tmp_path / "selected.json", {"candidate": selected})
    return {"folds_path": str(tmp_path / "folds.json"), "selected_path": str(tmp_path / "selected.json"),
            "cv_paths": {"m": str(tmp_path / "m_cv.json")}, "out_cv": str(tmp_path / "cv.json")}, record


def test_gap_job_adds_the_gap_to_the_fit_record(tmp_path):
    paths, record = _gap_inputs(tmp_path)
    cv = challenger_stage.run_challenger_gap(**paths)
    written = json.loads((tmp_path / "cv.json").read_text())
    assert written == cv and {k: v for k, v in written.items() if k != "gap"} == record
    # The hand-computed gap of test_gap_and_its_interval_by_hand, on the same fold values.
    assert written["gap"]["selected"] == "m"
    assert written["gap"]["log_loss"]["advantage"] == pytest.approx(0.0133333, abs=1e-7)
    assert written["gap"]["large"] is False and written["gap"]["auc"]["advantage"] is None


@pytest.mark.parametrize("selected, folds_name, expected", [
    ("other", "challenger", "names candidate 'other', which has no cv.json"),
    ("m", "logit", "is not the challenger's fold record"),
])
def test_gap_job_names_a_wrong_input_and_writes_nothing(tmp_path, selected, folds_name, expected):
    paths, _ = _gap_inputs(tmp_path, selected=selected, folds_name=folds_name)
    with pytest.raises(ArtifactError) as info:
        challenger_stage.run_challenger_gap(**paths)
    assert expected in str(info.value)
    assert not (tmp_path / "cv.json").exists()


def test_gap_sentences_say_which_way_and_turn_the_interval():
    better = {"metric": "log_loss", "advantage": 0.012, "lower": 0.004, "upper": 0.020, "level": 0.95,
              "relative": 0.03}
    worse = {"metric": "auc", "advantage": -0.05, "lower": -0.08, "upper": -0.02, "level": 0.95, "relative": -0.07}
    assert "log loss is 0.0120 lower" in card_findings.challenger_gap_sentence(better, selected="m")
    assert "(95% interval 0.0040 to 0.0200" in card_findings.challenger_gap_sentence(better, selected="m")
    text = card_findings.challenger_gap_sentence(worse, selected="m")
    assert "AUC is 0.050 lower" in text and "(95% interval 0.020 to 0.080; 7.0%" in text
    missing = {"metric": "auc", "advantage": None, "note": "AUC undefined on every fold"}
    assert card_findings.challenger_gap_sentence(missing, selected="m") == "The gap in AUC cannot be stated: AUC undefined on every fold."


# ---------------------------------------------------------------------------------------------
# configuration and no pickle


def test_config_fills_challenger_defaults_and_names_bad_values(demo_config, root):
    assert check_config(demo_config, project_dir=root)["challenger"] == {
        "enabled": True, "max_iter": 200, "learning_rate": 0.1, "max_leaf_nodes": 31, "seed": 1}
    demo_config["challenger"] = {"learning_rate": 0, "max_leaf_nodes": 1}
    with pytest.raises(ConfigError) as info:
        check_config(demo_config, project_dir=root)
    assert "challenger.learning_rate" in str(info.value) and "challenger.max_leaf_nodes" in str(info.value)


def test_no_pickle_in_the_challenger_code():
    for path in ("oddsmith/fitting/challenger.py", "oddsmith/stages/challenger.py", "scripts/challenger_fit.py", "scripts/challenger_gap.py",
                 "rules/challenger.smk"):
        text = (ROOT / path).read_text(encoding="utf-8")
        assert not any(word in text for word in ("import pickle", "joblib", ".pkl", "dump(")), path


# ---------------------------------------------------------------------------------------------
# end to end


@pytest.fixture(scope="module")
def demo_run(demo_build) -> Path:
    return demo_build / RUN


@pytest.mark.e2e
def test_challenger_used_the_candidates_folds(demo_run):
    assignment = pd.read_parquet(artifacts.in_folder(demo_run, "split/assignment.parquet"))
    train = assignment[assignment["part"] == "train"]
    oof = pd.read_parquet(artifacts.in_folder(demo_run, "challenger/oof.parquet"))
    selected = json.loads(artifacts.in_folder(demo_run, "comparison/selected.json").read_text())["candidate"]
    candidate = pd.read_parquet(artifacts.in_folder(demo_run, "candidates/{candidate}/oof.parquet", candidate=selected))
    assert (oof["id"].to_numpy() == train["id"].to_numpy()).all()
    assert (oof["id"].to_numpy() == candidate["id"].to_numpy()).all()
    cv = json.loads(artifacts.in_folder(demo_run, "challenger/cv.json").read_text())
    cand_cv = json.loads(artifacts.in_folder(demo_run, "candidates/{candidate}/cv.json", candidate=selected).read_text())
    fold_sizes = train["fold"].value_counts().sort_index().to_dict()
    assert {f["fold"]: f["n"] for f in cv["folds"]} == fold_sizes
    assert [(f["repeat"], f["fold"], f["n"], f["n_train"]) for f in cv["folds"]] == [
        (f["repeat"], f["fold"], f["n"], f["n_train"]) for f in cand_cv["folds"]]
    assert cv["adoptable"] is False and cv["library_version"]
    assert cv["gap"]["selected"] == selected
    fit_record = json.loads(artifacts.in_folder(demo_run, "challenger/folds.json").read_text())
    assert {k: v for k, v in cv.items() if k != "gap"} == fit_record, "the gap job adds the gap, nothing else"


@pytest.mark.e2e
def test_no_pickle_in_the_run_folder(demo_run):
    for path in demo_run.rglob("*"):
        if path.is_file():
            assert path.suffix not in (".pkl", ".pickle", ".joblib"), path
            assert not path.read_bytes()[:1] == b"\x80", f"{path} starts like a pickle"


@pytest.mark.e2e
def test_stamps_claim_the_challenger_files(demo_run):
    stamp = json.loads(artifacts.in_folder(demo_run, "provenance/challenger_fit.json").read_text())
    assert sorted(Path(p).name for p in stamp["outputs"]) == ["folds.json", "oof.parquet"]
    stamp = json.loads(artifacts.in_folder(demo_run, "provenance/challenger_gap.json").read_text())
    assert [Path(p).name for p in stamp["outputs"]] == ["cv.json"]
    assert not any("comparison" in p or "candidates" in p for p in
                   json.loads(artifacts.in_folder(demo_run, "provenance/challenger_fit.json").read_text())["inputs"]), \
        "the trees read nothing the candidates' fits or compare write"
    manifest = json.loads(artifacts.in_folder(demo_run, artifacts.MANIFEST).read_text())
    assert any(p.endswith("challenger/cv.json") for p in manifest["files"])


@pytest.mark.e2e
def test_card_shows_the_challenger_line_and_says_when_it_is_off(demo_run, tmp_path):
    html = artifacts.in_folder(demo_run, "card/model_card.html").read_text(encoding="utf-8")
    assert "challenger — not for adoption" in html
    gap = json.loads(artifacts.in_folder(demo_run, "challenger/cv.json").read_text())["gap"]
    sentence = card_findings.challenger_gap_sentence(gap["log_loss"], selected=gap["selected"])
    assert sentence.replace("'", "&#39;") in html
    copy = tmp_path / "lease_demo"
    shutil.copytree(demo_run, copy, ignore=shutil.ignore_patterns("card"))
    run = card_loader.load_run(card_loader.folder_inputs(copy))
    run["config"]["challenger"]["enabled"], run["challenger"] = False, None
    off = card.render_html(card.build_context(run, release=None))
    assert "Not run: challenger.enabled is false" in off and "not for adoption" in off
    artifacts.in_folder(copy, "challenger/cv.json").unlink()
    with pytest.raises(ArtifactError) as info:
        card_loader.load_run(card_loader.folder_inputs(copy))
    assert "challenger/cv.json" in str(info.value)
