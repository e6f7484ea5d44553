"""Scoring with a frozen model: exact probabilities, reason codes checked by hand, CSV
neutralisation, bad batches and bad results folders refused with nothing written."""

from __future__ import annotations

import copy
import csv
import io
import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from oddsmith import artifacts
from oddsmith.data.recipe import learn_recipe
from oddsmith.errors import ArtifactError, ConfigError, ContractError, ManifestError
from oddsmith.io import read_parquet
from oddsmith.stages.score import run_score
from oddsmith.stages.score_commands import OUTPUTS, load_results_folder, score_folder
from oddsmith.use.score import (ScoringModel, check_batch, contributions, csv_bytes, design_matrix, feature_weights,
                            load_artifacts, neutralise_text, reason_reference, score_frame,
                            top_reasons)

from conftest import ROOT, run_snakemake

RUN = "lease_demo"
BATCH = ROOT / "data_demo" / "lease_applications_2026q1.csv"

# ---------------------------------------------------------------------------- a toy model by hand

# Training rows: (a, b) cycles through four pairs, so the training means are a = 1, b = 2 and
# a*b = (0 + 6 + 0 + 2) / 4 = 2. Levels "v" and "z" (4 rows each) are rarer than min_count 5
# and pool into "<other>" (8 rows); "w" is allowed by the contract but never seen in training.
PAIRS = [(0.0, 1.0), (2.0, 3.0), (0.0, 3.0), (2.0, 1.0)]
COEFFICIENTS = {"a": 0.8, "b": -0.5, "c=<other>": 0.4, "c=y": 1.2, "a:b": 0.3}
INTERCEPT = -1.0
TOY_CONTRACT = {
    "format": "oddsmith-contract/1",
    "columns": {
        "id": {"type": "string", "unique": True},
        "a": {"type": "float", "min": 0, "max": 10},
        "b": {"type": "float", "min": 0, "max": 10},
        "c": {"type": "category", "levels": ["v", "w", "x", "y", "z"], "nullable": True},
        "note": {"type": "string", "nullable": True, "required": False},
        "y": {"type": "category", "levels": ["0", "1"]},
    },
}


def toy_training() -> pd.DataFrame:
    rows = [PAIRS[i % 4] + ("x" if i < 20 else "y",) for i in range(40)] + [p + (c,) for c in "vz" for p in PAIRS]
    frame = pd.DataFrame(rows, columns=["a", "b", "c"])
    frame.insert(0, "id", [f"T{i:03d}" for i in range(len(frame))])
    frame["y"] = np.arange(len(frame)) % 2
    return frame


def toy_model(*, link: str = "logit", cutoff=0.5) -> ScoringModel:
    training = toy_training()
    features = [{"name": "a", "type": "numeric"}, {"name": "b", "type": "numeric"},
                {"name": "c", "type": "categorical", "reference": "x", "min_count": 5, "missing": "indicator"}]
    recipe = learn_recipe(training, features=features, interactions=[["a", "b"]], target="y", id_column="id")
    columns = list(recipe["columns"])
    assert sorted(columns) == sorted(COEFFICIENTS), columns
    model = {"format": "oddsmith-model/1", "status": "ok", "kind": "logit" if link == "logit" else link, "link": link,
             "intercept": INTERCEPT, "coefficients": dict(COEFFICIENTS), "feature_names": columns,
             "design_columns": columns, "standardise": False, "candidate": "toy"}
    contract = copy.deepcopy(TOY_CONTRACT)
    for spec in contract["columns"].values():
        spec.setdefault("nullable", False)
        spec.setdefault("unique", False)
        spec.setdefault("required", True)
    return ScoringModel(recipe=recipe, model=model, contract=contract, candidate="toy", cutoff=cutoff,
                        id_column="id", target="y", training=training, source="toy")


def raw_rows(*rows) -> pd.DataFrame:
    """Raw text cells as a CSV reader gives them (None = empty cell)."""
    return pd.DataFrame([dict(zip(["id", "a", "b", "c"], r)) for r in rows], dtype=object)


def test_toy_contributions_by_hand():
    sm = toy_model()
    typed, _ = check_batch(sm, raw_rows(("R1", "3", "1", "y"), ("R2", "0", "3", "x")))
    X, _ = design_matrix(sm, typed)
    reference = reason_reference(sm, "training_mean")
    got = pd.DataFrame(contributions(sm, X, reference), columns=reference["features"])
    # Row R1 (a=3, b=1, c=y). Partial score of a: 0.8*3 + 0.5*0.3*3*1 = 2.85; at the means
    # 0.8*1 + 0.5*0.3*2 = 1.1 -> 1.75. b: -0.5*1 + 0.45 = -0.05; at the means -1.0 + 0.3 = -0.7
    # -> 0.65. c: 1.2 - (1.2*20/48 + 0.4*8/48) = 30.4/48.
    assert got.loc[0, "a"] == pytest.approx(1.75, abs=1e-12)
    assert got.loc[0, "b"] == pytest.approx(0.65, abs=1e-12)
    assert got.loc[0, "c"] == pytest.approx(30.4 / 48, abs=1e-12)
    # Row R2 (a=0, b=3, c=x): a 0 - 1.1, b -1.5 - (-0.7), c 0 - 27.2/48: nothing pushes up.
    assert got.loc[1].tolist() == pytest.approx([-1.1, -0.8, -27.2 / 48], abs=1e-12)
    # The contributions add up to eta - eta_ref exactly (eta of R1 = 3.0).
    assert reference["eta"] == pytest.approx(INTERCEPT + 0.8 - 1.0 + 0.6 + 27.2 / 48, abs=1e-12)
    assert got.loc[0].sum() == pytest.approx(3.0 - reference["eta"], abs=1e-12)

    scored = score_frame(sm, typed, top_k=3, reference=reference)
    assert scored.loc[0, ["reason_1", "reason_2", "reason_3"]].tolist() == ["a", "b", "c"]
    assert scored.loc[0, "reason_1_contribution"] == pytest.approx(1.75, abs=1e-12)
    assert scored.loc[1, ["reason_1", "reason_2", "reason_3"]].isna().all(), "no reason when nothing pushes up"
    assert scored.loc[0, "probability"] == pytest.approx(1 / (1 + np.exp(-3.0)), abs=1e-15)
    assert scored["decision"].tolist() == ["flag", "pass"]  # R2: eta = -1 - 1.5 = -2.5, p = 0.076 < 0.5


def test_toy_most_favourable_reference_by_hand():
    sm = toy_model()
    reference = reason_reference(sm, "most_favourable")
    # Partial scores over the four training pairs: a -> 0, 2.5, 0, 1.9 (min 0);
    # b -> -0.5, -0.6, -1.5, -0.2 (min -1.5, at a=0, b=3); c -> 0 for x (min).
    assert reference["partial"] == pytest.approx({"a": 0.0, "b": -1.5, "c": 0.0}, abs=1e-12)
    assert reference["observed_at"]["b"]["value"] == 3.0
    typed, _ = check_batch(sm, raw_rows(("R1", "3", "1", "y")))
    scored = score_frame(sm, typed, top_k=2, reference=reference)
    assert scored.loc[0, "reason_1"] == "a" and scored.loc[0, "reason_1_contribution"] == pytest.approx(2.85)
    assert scored.loc[0, "reason_2"] == "b" and scored.loc[0, "reason_2_contribution"] == pytest.approx(1.45)
    X, _ = design_matrix(sm, sm.training)
    assert (contributions(sm, X, reference) >= -1e-12).all(), "no training row is more favourable than the reference"


def test_feature_weights_split_interactions_in_half():
    sm = toy_model()
    names, W = feature_weights(sm.recipe, sm.model["design_columns"])
    assert names == ["a", "b", "c"]
    rows = dict(zip(sm.model["design_columns"], W.tolist()))
    assert rows["a:b"] == [0.5, 0.5, 0.0] and rows["c=<other>"] == [0.0, 0.0, 1.0]
    assert W.sum(axis=1).tolist() == [1.0] * len(names) + [1.0] * (W.shape[0] - len(names))


def test_top_reasons_ties_and_short_rows():
    labels, values = top_reasons(np.array([[0.3, 0.3, 0.1], [0.0, -1.0, 2.0]]), ["p", "q", "r"], top_k=4)
    assert labels.tolist() == [["p", "q", "r", None], ["r", None, None, None]]
    assert np.isnan(values[1, 1:]).all() and values[0, :3].tolist() == [0.3, 0.3, 0.1]


@pytest.mark.parametrize("link", ["probit", "cloglog"])
def test_reasons_on_link_scale_for_other_links(link):
    sm = toy_model(link=link)
    typed, _ = check_batch(sm, raw_rows(("R1", "3", "1", "y")))
    scored = score_frame(sm, typed)
    from scipy.stats import norm
    expected = norm.cdf(3.0) if link == "probit" else 1 - np.exp(-np.exp(3.0))
    assert scored.loc[0, "probability"] == pytest.approx(expected, abs=1e-15)
    # The same linear predictor, so the same link-scale contributions as for the logit.
    assert scored.loc[0, "linear_predictor"] == pytest.approx(3.0, abs=1e-12)
    assert scored.loc[0, "reason_1_contribution"] == pytest.approx(1.75, abs=1e-12)


def test_policy_flags_for_missing_and_unseen_levels():
    sm = toy_model()
    typed, _ = check_batch(sm, raw_rows(("R1", "1", "1", None), ("R2", "1", "1", "w"), ("R3", "1", "1", "z")))
    scored = score_frame(sm, typed)
    assert scored["c:filled"].tolist() == [True, False, False]
    assert scored["c:unseen"].tolist() == [True, True, False]
    # Missing and unseen values both go to the learned "<other>" level, as the recipe declares.
    assert scored["probability"].nunique() == 1


def test_cutoff_none_flags_nobody():
    sm = toy_model(cutoff=None)
    typed, _ = check_batch(sm, raw_rows(("R1", "9", "0", "y")))
    assert score_frame(sm, typed)["decision"].tolist() == ["pass"]


# ---------------------------------------------------------------------------- CSV


def test_csv_neutralises_text_cells_not_numbers():
    frame = pd.DataFrame({
        "id": ["=HYPERLINK(\"http://x\")", "+41", "-2+3", "@SUM(A1)", "\tTAB", "\rCR", "plain", None],
        "probability": [0.5, -0.25, 1e-20, 0.0, 1.0, 0.75, 0.125, 0.5],
        "=bad header": ["a", "b", "c", "d", "e", "f", "g", "h"],
    })
    text = csv_bytes(frame).decode("utf-8")
    rows = list(csv.reader(io.StringIO(text)))
    assert rows[0] == ["id", "probability", "'=bad header"]
    ids = [r[0] for r in rows[1:]]
    assert ids == ["'=HYPERLINK(\"http://x\")", "'+41", "'-2+3", "'@SUM(A1)", "'\tTAB", "'\rCR", "plain", ""]
    # Numbers are written as numbers: a negative value keeps its sign and parses back exactly.
    assert [float(r[1]) for r in rows[1:]] == frame["probability"].tolist()
    assert rows[2][1] == "-0.25"
    assert neutralise_text(pd.Series(["ok", "=1"])).tolist() == ["ok", "'=1"]


# ---------------------------------------------------------------------------- bad batches


def _expect(sm, raw, *fragments, **kw):
    with pytest.raises(ContractError) as err:
        check_batch(sm, raw, **kw)
    for fragment in fragments:
        assert fragment in str(err.value), f"{fragment!r} not in:\n{err.value}"
    return str(err.value)


def test_bad_batches_are_refused_with_every_problem_named():
    sm = toy_model()
    _expect(sm, raw_rows(("R1", "1", "1", "x")).iloc[:0], "0 rows")
    _expect(sm, raw_rows(("R1", "1", "1", "x")).drop(columns="b"), "column 'b': a feature of the model, not found")
    _expect(sm, raw_rows(("R1", "1", "1", None), ("R2", "2", "1", None)), "column 'c' is empty in every one of the 2 rows")
    _expect(sm, raw_rows(("R1", "1", "1", "x"), ("R1", "2", "1", "x"), (None, "1", "1", "x")),
            "1 id(s) appear more than once", "'R1'", "row(s) without an id")
    message = _expect(sm, raw_rows(("R1", "11", "1", "q")), "less_than_or_equal_to(10)", "'q'")
    assert "nothing was scored" in message
    extra = raw_rows(("R1", "1", "1", "x")).assign(colour="red")
    _expect(sm, extra, "['colour'] are not declared", "scoring.extra_columns is 'reject'")
    typed, ignored = check_batch(sm, extra, extra_columns="ignore")
    assert ignored == ["colour"] and "colour" not in typed.columns


def test_one_row_batch_may_have_an_empty_nullable_cell():
    typed, _ = check_batch(toy_model(), raw_rows(("R1", "1", "1", None)))
    assert len(typed) == 1


# ---------------------------------------------------------------------------- the demo build


def _paths(project: Path) -> dict:
    r = project / "results" / RUN
    models = {p.parent.name: p for p in sorted((r / "candidates").glob("*/model.json"))}
    return dict(recipe_path=artifacts.in_folder(r, "features/recipe.json"),
                selected_path=artifacts.in_folder(r, artifacts.SELECTED), model_paths=models,
                choice_path=artifacts.in_folder(r, "threshold/choice.json"),
                contract_path=artifacts.in_folder(r, "validated/contract.yaml"),
                data_path=artifacts.in_folder(r, "validated/data.parquet"),
                assignment_path=artifacts.in_folder(r, "split/assignment.parquet"))


@pytest.fixture(scope="module")
def demo_model(demo_build) -> ScoringModel:
    return load_artifacts(**_paths(demo_build), id_column="application_id", target="serious_delinquency",
                          source="demo")


@pytest.mark.e2e
def test_scores_equal_the_evaluation_predictions(demo_build, demo_model):
    r = demo_build / "results" / RUN
    data = read_parquet(artifacts.in_folder(r, "validated/data.parquet"))
    assignment = read_parquet(artifacts.in_folder(r, "split/assignment.parquet"))
    test = data.loc[(assignment["part"] == "test").to_numpy()].reset_index(drop=True)
    scored = score_frame(demo_model, test)
    evaluated = read_parquet(artifacts.in_folder(r, "evaluation/predictions.parquet"))
    assert scored["id"].tolist() == evaluated["id"].astype(str).tolist()
    np.testing.assert_allclose(scored["probability"], evaluated["p"], rtol=0, atol=1e-12)
    assert ((scored["decision"] == "flag").astype(int) == evaluated["flagged"]).all()


@pytest.mark.e2e
def test_demo_build_scores_the_later_batch(demo_build):
    out = demo_build / "results" / RUN / "scoring"
    summary = json.loads((out / "summary.json").read_text())
    raw = pd.read_csv(BATCH, dtype=str, keep_default_na=False, na_values=[""])
    assert summary["rows"] == len(raw) == 2000
    assert summary["policy_flags"]["guarantor_score:filled"] == int(raw["guarantor_score"].isna().sum()) > 0
    scores = read_parquet(out / "scores.parquet")
    assert scores["id"].tolist() == raw["application_id"].tolist()
    from_csv = pd.read_csv(out / "scores.csv")
    np.testing.assert_array_equal(from_csv["probability"].to_numpy(), scores["probability"].to_numpy())
    assert summary["flagged"] == int((scores["decision"] == "flag").sum())
    assert summary["source"]["sha256"] == __import__("hashlib").sha256(BATCH.read_bytes()).hexdigest()
    drift = json.loads((out / "drift.json").read_text())
    assert drift["ranking"][0] == "debt_service_ratio", "the deliberately shifted feature ranks first"
    assert (out / "drift.pdf").read_bytes().startswith(b"%PDF-")


@pytest.mark.e2e
def test_run_score_writes_nothing_for_a_bad_batch(demo_build, tmp_path, monkeypatch):
    bad = pd.read_csv(BATCH, dtype=str, keep_default_na=False).head(50)
    bad.loc[3, "application_id"] = bad.loc[4, "application_id"]
    bad["credit_score"] = ""
    monkeypatch.chdir(demo_build)
    path = demo_build / "data_demo" / "bad_batch.csv"
    bad.to_csv(path, index=False)
    out = tmp_path / "scoring"
    with pytest.raises(ContractError) as err:
        run_score(new_path=str(path.relative_to(demo_build)), **_paths(demo_build),
                  data={"id_column": "application_id", "target": "serious_delinquency"}, scoring={},
                  template=str(ROOT / "reports" / "drift.html.j2"), stylesheets=[],
                  outputs={n: str(out / n) for n in OUTPUTS})
    path.unlink()
    assert "appear more than once" in str(err.value) and "column 'credit_score' is empty" in str(err.value)
    assert not out.exists()


@pytest.mark.e2e
def test_run_score_refuses_a_batch_outside_the_project(demo_build, tmp_path, monkeypatch):
    monkeypatch.chdir(demo_build)
    outside = tmp_path / "elsewhere.csv"
    shutil.copy(BATCH, outside)
    with pytest.raises(ConfigError, match="outside the project folder"):
        run_score(new_path=str(outside), **_paths(demo_build), data={"id_column": "application_id",
                  "target": "serious_delinquency"}, scoring={}, template="", stylesheets=[], outputs={})


# ---------------------------------------------------------------------------- results folders


def _copy_results(demo_build: Path, tmp_path: Path) -> Path:
    dest = tmp_path / "results" / RUN
    shutil.copytree(demo_build / "results" / RUN, dest)
    return dest


@pytest.mark.e2e
def test_folder_without_a_model_is_refused(demo_build, tmp_path):
    folder = _copy_results(demo_build, tmp_path)
    artifacts.in_folder(folder, "comparison/selected.json").unlink()
    with pytest.raises(ArtifactError, match="holds no model"):
        load_results_folder(folder)
    with pytest.raises(ArtifactError, match="results folder not found"):
        load_results_folder(tmp_path / "nothing")


@pytest.mark.e2e
def test_incompatible_formats_are_refused(demo_build, tmp_path):
    folder = _copy_results(demo_build, tmp_path)
    artifacts.in_folder(folder, artifacts.MANIFEST).write_text(json.dumps({"format": "oddsmith-manifest/2"}))
    with pytest.raises(ManifestError, match="'oddsmith-manifest/2' is not readable"):
        load_results_folder(folder)
    paths = _paths(folder.parent.parent)
    selected = json.loads(paths["selected_path"].read_text())["candidate"]
    model = json.loads(paths["model_paths"][selected].read_text())
    paths["model_paths"][selected].write_text(json.dumps(model | {"format": "oddsmith-model/2"}))
    with pytest.raises(ArtifactError, match="model: format 'oddsmith-model/2', this oddsmith reads 'oddsmith-model/1'"):
        load_artifacts(**paths, id_column="application_id", target="serious_delinquency")


@pytest.fixture(scope="module")
def verified_demo(demo_build) -> Path:
    """The demo build with its manifest (built here if the workflow has the rule)."""
    pytest.importorskip("oddsmith.evidence.verify", reason="oddsmith.evidence.verify is not in this tree yet")
    folder = demo_build / "results" / RUN
    if not artifacts.in_folder(folder, artifacts.MANIFEST).is_file():
        run_snakemake(demo_build)  # the default target publishes a verified result
    from oddsmith.evidence.verify import verify_results

    assert verify_results(folder) == []
    return folder


@pytest.mark.e2e
def test_cli_scores_a_verified_folder(verified_demo, tmp_path, capsys):
    from oddsmith.cli import main

    out = tmp_path / "out"
    assert main(["score", str(verified_demo), str(BATCH), "-o", str(out), "--top-k", "2"]) == 0
    assert "2,000 rows" in capsys.readouterr().out
    assert sorted(p.name for p in out.iterdir()) == sorted(OUTPUTS)
    before = {p.name: (p.read_bytes(), p.stat().st_mtime_ns) for p in out.iterdir()}
    assert main(["score", str(verified_demo), str(BATCH), "-o", str(out)]) == 1
    message = capsys.readouterr().err
    assert f"output folder {out} is not empty" in message and "--overwrite" in message
    assert {p.name: (p.read_bytes(), p.stat().st_mtime_ns) for p in out.iterdir()} == before
    assert main(["score", str(verified_demo), str(BATCH), "-o", str(out), "--top-k", "2", "--overwrite"]) == 0
    assert {p.name: p.read_bytes() for p in out.iterdir()} == {n: b for n, (b, _) in before.items()}
    scored = read_parquet(out / "scores.parquet")
    assert "reason_2" in scored.columns and "reason_3" not in scored.columns
    built = read_parquet(artifacts.in_folder(verified_demo, "scoring/scores.parquet"))
    np.testing.assert_array_equal(scored["probability"].to_numpy(), built["probability"].to_numpy())


@pytest.mark.e2e
def test_cli_refuses_a_tampered_folder_and_writes_nothing(verified_demo, tmp_path, capsys):
    from oddsmith.cli import main

    folder = _copy_results(verified_demo.parent.parent, tmp_path)
    choice = artifacts.in_folder(folder, "threshold/choice.json")
    choice.write_text(choice.read_text().replace('"adopted_cutoff": 0.', '"adopted_cutoff": 0.9'))
    out = tmp_path / "out"
    assert main(["score", str(folder), str(BATCH), "-o", str(out)]) == 1
    message = capsys.readouterr().err
    assert "does not match its manifest" in message and "threshold/choice.json" in message
    assert not out.exists()
    with pytest.raises(ArtifactError, match="inside the results folder"):
        score_folder(verified_demo, BATCH, verified_demo / "scoring-again")


def test_score_refuses_a_non_empty_output_folder_before_reading_anything(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("keep me")
    with pytest.raises(ArtifactError, match=f"output folder {out} is not empty \\(holds notes.txt\\).*--overwrite"):
        score_folder(tmp_path / "no-such-results", BATCH, out)
    assert [p.name for p in out.iterdir()] == ["notes.txt"] and (out / "notes.txt").read_text() == "keep me"
    (tmp_path / "a-file").write_text("")
    with pytest.raises(ArtifactError, match="exists and is not a folder"):
        score_folder(tmp_path / "no-such-results", BATCH, tmp_path / "a-file", overwrite=True)


def test_carried_text_from_the_batch_is_neutralised_in_csv_only():
    sm = toy_model()
    raw = raw_rows(("R1", "1", "1", "x"), ("=R2", "2", "1", "y")).assign(note=["@SUM(A1:A9)", "fine"])
    typed, _ = check_batch(sm, raw)
    scored = score_frame(sm, typed, carry_columns=["note"])
    assert list(scored.columns[:2]) == ["id", "note"] and scored["note"].tolist() == ["@SUM(A1:A9)", "fine"]
    rows = list(csv.reader(io.StringIO(csv_bytes(scored).decode("utf-8"))))
    assert [r[:2] for r in rows[1:]] == [["R1", "'@SUM(A1:A9)"], ["'=R2", "fine"]]
    from oddsmith.stages.score import _settings

    with pytest.raises(ConfigError, match="'y' is not a contract column other than the id and target"):
        _settings(sm, {"carry_columns": ["y"]})


@pytest.mark.e2e
def test_contributions_add_up_for_every_candidate_kind(demo_build, tmp_path):
    # Standardised (penalised), subset, probit, cloglog and intercept-only models alike:
    # the contributions of a row sum to eta - eta_ref (training_mean reference).
    paths = _paths(demo_build)
    batch = None
    for name in paths["model_paths"]:
        selected = tmp_path / f"{name}.json"
        selected.write_text(json.dumps({"candidate": name}))
        sm = load_artifacts(**(paths | {"selected_path": selected}), id_column="application_id",
                            target="serious_delinquency")
        if batch is None:
            batch, _ = check_batch(sm, pd.read_csv(BATCH, dtype=str, keep_default_na=False, na_values=[""]))
        reference = reason_reference(sm)
        X, _ = design_matrix(sm, batch)
        scored = score_frame(sm, batch, reference=reference)
        total = contributions(sm, X, reference).sum(axis=1)
        np.testing.assert_allclose(total, scored["linear_predictor"] - reference["eta"], rtol=0, atol=1e-9,
                                   err_msg=name)
