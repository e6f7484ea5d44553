"""The artifact registry: every file of a run folder named once, each with exactly one writing
rule, and the rules writing nothing the registry does not name."""

from __future__ import annotations

import re
from collections import defaultdict

import pytest
import yaml

from oddsmith import artifacts
from oddsmith.config import check_config
from oddsmith.errors import ArgumentError
from conftest import run_snakemake


def test_paths_fill_their_wildcards_and_refuse_unknown_names():
    assert artifacts.path("comparison/table.json") == "comparison/table.json"
    assert artifacts.path(artifacts.MODEL, candidate="ridge") == "candidates/ridge/model.json"
    assert artifacts.ARTIFACTS["figures/roc.svg"].kind == "svg"
    assert artifacts.ARTIFACTS["card/card.sha256"].kind == "sha256sum"
    with pytest.raises(ArgumentError, match=r"no artifact named 'evaluation/metrics\.json'"):
        artifacts.path("evaluation/metrics.json")
    with pytest.raises(ArgumentError, match=r"takes the wildcards \['candidate'\], got \[\]"):
        artifacts.path(artifacts.MODEL)
    with pytest.raises(ArgumentError, match=r"takes the wildcards \[\], got \['candidate'\]"):
        artifacts.path("manifest.json", candidate="ridge")


def test_every_stamp_is_named_after_its_rule():
    stamps = [a for a in artifacts.ARTIFACTS.values() if a.is_stamp]
    assert {a.rule for a in stamps} == {a.rule for a in artifacts.ARTIFACTS.values()} - {"manifest", "card"}
    for a in stamps:
        assert a.path == f"provenance/{a.rule}.json" or a.path == f"provenance/{a.rule}-{{candidate}}.json"


def test_score_command_writes_the_score_rules_names():
    assert artifacts.outputs_of("score") == ("scores.parquet", "scores.csv", "summary.json", "drift.json",
                                             "drift.html", "drift.pdf")


def _registered(run: str, candidates: list[str]) -> dict[str, str]:
    """Every concrete path of a run's registered files (work/<run>/...) → its registry path."""
    concrete = {f"work/{artifacts.PUBLISHED_MARKER.format(run=run)}": artifacts.PUBLISHED_MARKER}
    for name, artifact in artifacts.ARTIFACTS.items():
        fills = [{"candidate": c} for c in candidates] if artifact.wildcards else [{}]
        concrete |= {f"work/{run}/{artifacts.path(name, **fill)}": name for fill in fills}
    return concrete


def test_each_artifact_has_exactly_one_writing_rule_and_no_rule_writes_an_unregistered_file(project):
    raw = yaml.safe_load((project / "config" / "demo.yaml").read_text())
    # The demo enables the challenger and scoring; with the refit on all rows as well, every
    # optional rule and so every artifact is in the DAG.
    raw.setdefault("evaluation", {})["refit_all"] = True
    (project / "config" / "every_rule.yaml").write_text(yaml.safe_dump(raw, sort_keys=False))
    config = check_config(raw, project_dir=project)
    assert config["challenger"]["enabled"] and config["scoring"]["data"]
    run, candidates = config["run"], [c["name"] for c in config["candidates"]]
    summary = run_snakemake(project, "--detailed-summary", config="config/every_rule.yaml").stdout.splitlines()
    header = summary[0].split("\t")
    registered = _registered(run, candidates)
    writers = defaultdict(set)
    for line in summary[1:]:
        fields = dict(zip(header, line.split("\t")))
        writers[registered.get(fields["output_file"], fields["output_file"])].add(fields["rule"])
    unregistered = sorted(set(writers) - set(artifacts.ARTIFACTS) - {artifacts.PUBLISHED_MARKER})
    assert unregistered == [], f"rules write files oddsmith.artifacts does not name: {unregistered}"
    assert writers.pop(artifacts.PUBLISHED_MARKER) == {artifacts.PUBLISH_RULE}
    wrong = {p: (sorted(writers.get(p, ())), a.rule) for p, a in artifacts.ARTIFACTS.items()
             if writers.get(p) != {a.rule}}
    assert wrong == {}, "artifact: (rules writing it, rule registered)"


def test_rules_spell_no_run_folder_path(root):
    """Rules take every path of the run folder from artifact(...) (rules/common.smk)."""
    literal = re.compile(r"""["']work/\{\{?run\}?\}/""")
    found = [f"{p.name}:{n}" for p in sorted((root / "rules").glob("*.smk"))
             for n, line in enumerate(p.read_text().splitlines(), 1) if literal.search(line)]
    assert found == ["common.smk:" + str(n) for n, line in enumerate(
        (root / "rules" / "common.smk").read_text().splitlines(), 1) if literal.search(line)]
    assert len(found) == 1


def test_a_rule_naming_an_unregistered_file_stops_the_workflow(project):
    rules = project / "rules" / "apply_cutoff.smk"
    rules.write_text(rules.read_text().replace('artifact("evaluation/cutoff_metrics.json")',
                                               'artifact("evaluation/metrics.json")'))
    result = run_snakemake(project, "--dry-run", check=False)
    assert result.returncode != 0
    assert "no artifact named 'evaluation/metrics.json' in oddsmith.artifacts" in result.stdout + result.stderr
    assert not (project / "work").exists()
