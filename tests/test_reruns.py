"""Precise reruns (design principle 1): after one change to a finished demo build, Snakemake
plans exactly the jobs that change touches — read from its dry-run, job by job.

Each case works on a copy of the shared demo build (results, logs and Snakemake's metadata,
modification times kept). The copy is first brought up to date, so that edits other people
made to the package since the shared build cannot leak into the planned set. For edits of
package modules the copy carries its own ``oddsmith/`` and runs with PYTHONPATH pointing at it
(the installed package is an editable install of the main checkout)."""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from conftest import DEMO_CONFIG, ROOT, run_snakemake
from oddsmith.runner import clear_code_cache, code_closure, import_statements, script_fingerprint

RUN = "work/lease_demo"  # the staging folder the jobs write
CANDIDATES = {"logit_main", "probit_main", "cloglog_main", "lasso", "ridge", "logit_compact", "baseline"}
#: Every rule this matrix knows; a new rule fails the test until its row is added here.
KNOWN = {"validate", "split", "features", "fit", "compare", "challenger_fit", "challenger_gap", "threshold", "evaluate",
         "apply_cutoff", "model_figures", "figures", "subgroup_figure", "score", "manifest", "card", "publish"}
#: Rules after apply_cutoff, present or not depending on the workflow and the config.
TAIL = {"figures", "subgroup_figure", "score", "manifest", "card", "publish"}


_TARGETS: dict[str, tuple[str, ...]] = {}


def targets(project: Path) -> tuple[str, ...]:
    """The default target plus the manifest and card (asked by name in case `all` stops earlier)."""
    key = "".join(p.read_text() for p in [project / "Snakefile", *sorted((project / "rules").glob("*.smk"))])
    if key not in _TARGETS:
        rules = run_snakemake(project, "--list-rules").stdout.split()
        _TARGETS[key] = ("all", f"{RUN}/manifest.json") + ((f"{RUN}/card/card.sha256",) if "card" in rules else ())
    return _TARGETS[key]


def planned(project: Path, *args, env=None) -> set[str]:
    """The jobs of a dry run: rule names, ``fit[<candidate>]`` for per-candidate jobs."""
    out = run_snakemake(project, "--dry-run", *args, env=env).stdout
    jobs, current = set(), None
    for line in out.splitlines() + ["rule end:"]:
        match = re.match(r"^(?:local)?rule (\w+):$", line)
        if match:
            if current and current != "all":
                jobs.add(current)
            current = match.group(1)
        elif current and line.strip().startswith("wildcards:"):
            wildcards = dict(part.split("=", 1) for part in line.split(":", 1)[1].strip().split(", "))
            if "candidate" in wildcards:
                current = f"{current}[{wildcards['candidate']}]"
    return jobs


@pytest.fixture(scope="module")
def built(demo_build) -> Path:
    run_snakemake(demo_build, *targets(demo_build))
    return demo_build


@pytest.fixture(scope="module")
def every_job(built) -> set[str]:
    jobs = planned(built, *targets(built), "--forceall")
    assert {re.sub(r"\[.*\]$", "", j) for j in jobs} <= KNOWN, f"extend the rerun matrix for {jobs}"
    assert {f"fit[{c}]" for c in CANDIDATES} <= jobs
    return jobs


def _copy(built: Path, dest: Path, *, with_package: bool = False) -> tuple[Path, dict]:
    shutil.copytree(built, dest, symlinks=True, ignore=shutil.ignore_patterns("__pycache__"))
    env = {}
    if with_package:
        shutil.copytree(ROOT / "oddsmith", dest / "oddsmith", ignore=shutil.ignore_patterns("__pycache__"))
        # with pyproject.toml the copy is a source checkout: the package finds the copy's
        # schemas/ and reports/ (oddsmith.resources), not the data packages of an install
        shutil.copy2(ROOT / "pyproject.toml", dest / "pyproject.toml")
        env = {"PYTHONPATH": str(dest)}
        found = subprocess.run([sys.executable, "-c", "import oddsmith; print(oddsmith.__file__)"], cwd=dest / "config",
                               env={"PYTHONPATH": str(dest)}, capture_output=True, text=True).stdout.strip()
        assert Path(found) == dest / "oddsmith" / "__init__.py", f"the copy's package is not the one imported: {found}"
    run_snakemake(dest, *targets(dest), env=env)  # bring up to date (absorbs concurrent edits of the checkout)
    return dest, env


def _tail(every_job: set[str], *rules: str) -> set[str]:
    return set(rules) | (TAIL & every_job)


@pytest.mark.e2e
def test_nothing_changed_plans_nothing(built):
    assert planned(built, *targets(built)) == set()


def _copy_with_edit(built, folder, old: str, new: str):
    """A copy of the built project whose demo config has ``old`` replaced by ``new``."""
    project, env = _copy(built, folder)
    config = project / DEMO_CONFIG
    text = config.read_text()
    assert old in text
    config.write_text(text.replace(old, new))
    return project, env


@pytest.mark.e2e
def test_costs_rerun_threshold_and_what_follows(built, every_job, tmp_path):
    project, env = _copy_with_edit(built, tmp_path / "costs", "false_positive: 1200", "false_positive: 1500")
    # the test part is not scored again (evaluate measures only what the cut-off does not
    # change) and the figures that do not show the cut-off are not redrawn (model_figures)
    assert planned(project, *targets(project), env=env) == _tail(every_job, "threshold", "apply_cutoff")


#: The jobs a change of costs alone reruns (where the workflow has them): the cut-off, the
#: decision figures and what records them. Not evaluate (the test part is scored once), not
#: model_figures (no cut-off on them).
COST_JOBS = {"threshold", "apply_cutoff", "figures", "subgroup_figure", "score", "manifest", "card", "publish"}


@pytest.mark.e2e
def test_a_false_negative_cost_reruns_exactly_the_cost_jobs(built, every_job, tmp_path):
    project, env = _copy_with_edit(built, tmp_path / "false_negative", "false_negative: 6000", "false_negative: 6600")
    assert planned(project, *targets(project), env=env) == COST_JOBS & every_job


def _touch(path: Path) -> None:
    """Set a file's modification time to now without changing its bytes (as `touch` does):
    newer than every output of the copied build, whose files keep their times."""
    before = path.stat().st_mtime_ns
    os.utime(path)
    assert path.stat().st_mtime_ns > before


@pytest.mark.e2e
def test_touched_raw_inputs_rerun_nothing(built, tmp_path):
    """A newer modification time with the same bytes (a copy, a checkout, `touch`): the data
    file, its contract, the scoring batch and the config file plan no job."""
    project, env = _copy(built, tmp_path / "touched")
    for path in ("data_demo/lease_applications.csv", "schemas/contracts/lease_applications.yaml",
                 "data_demo/lease_applications_2026q1.csv", DEMO_CONFIG):
        _touch(project / path)
    assert planned(project, *targets(project), env=env) == set()


@pytest.mark.e2e
def test_changed_data_with_an_older_clock_reruns_everything(built, every_job, tmp_path):
    """New bytes whose modification time is put back before every output's (`cp -p` of an
    older file): the content, not the clock, decides."""
    project, env = _copy(built, tmp_path / "older")
    data = project / "data_demo" / "lease_applications.csv"
    old = data.stat()
    data.write_text(data.read_text() + "\n")  # new bytes: one more (empty) line at the end
    os.utime(data, ns=(old.st_atime_ns, old.st_mtime_ns - 3600 * 10**9))
    assert planned(project, *targets(project), env=env) == every_job


def _reorder_costs(text: str) -> str:
    block = "  false_positive: 1200\n  false_negative: 6000\n"
    assert block in text
    return text.replace(block, "  false_negative: 6000\n  false_positive: 1200\n")


def _move_selection_below_costs(text: str) -> str:
    selection = "selection:\n  metric: log_loss\n  rule: one_standard_error\n"
    assert selection in text
    text = text.replace(selection, "")
    return text.replace("\n# Test-part intervals", f"\n{selection}\n# Test-part intervals")


def _spell_numbers_as_floats(text: str) -> str:
    for old, new in (("false_positive: 1200", "false_positive: 1200.0"), ("folds: 5", "folds: 5.0"),
                     ("min_group_size: 100", "min_group_size: 100.0"), ("1.0]}", "1]}")):
        assert old in text
        text = text.replace(old, new)
    return text


def _defaults_written_out(text: str) -> str:
    """A schema default spelled out in the file (it lands at another place among the keys)."""
    assert "  adopt: empirical\n" in text
    return text.replace("  adopt: empirical\n", "  true_negative: 0\n  adopt: empirical\n")


@pytest.mark.e2e
@pytest.mark.parametrize("edit", [_reorder_costs, _move_selection_below_costs, _spell_numbers_as_floats,
                                  _defaults_written_out])
def test_a_config_that_says_the_same_thing_reruns_only_its_record(built, every_job, tmp_path, edit):
    """Key order, int/float spelling and written-out defaults carry no meaning: the checked
    configuration (and so every rule's params) is the same."""
    project, env = _copy(built, tmp_path / edit.__name__)
    config = project / DEMO_CONFIG
    config.write_text(edit(config.read_text()))
    # the manifest records the config file's hash, so an edit of the file itself reruns the
    # manifest, the card that prints it and publication; no job that computes anything
    assert planned(project, *targets(project), env=env) == {"manifest", "card", "publish"} & every_job


@pytest.mark.e2e
def test_new_test_scores_rerun_what_follows_them_and_never_the_choices(built, every_job, tmp_path):
    """Selection and the cut-off are fixed without the test part: a changed test score reruns
    apply_cutoff, the figures drawn from the scores and what follows them, but neither compare
    nor threshold."""
    project, env = _copy(built, tmp_path / "scores")
    path = project / RUN / "evaluation" / "scores.parquet"
    scores = pd.read_parquet(path)
    scores.loc[0, "p"] = scores.loc[0, "p"] / 2  # new content (a touched file with the same bytes reruns nothing)
    scores.to_parquet(path)
    after = {"figures", "subgroup_figure", "manifest", "card", "publish"} & every_job
    assert planned(project, *targets(project), env=env) == {"apply_cutoff"} | after


@pytest.mark.e2e
def test_one_candidates_grid_reruns_that_candidate_and_downstream(built, every_job, tmp_path):
    project, env = _copy(built, tmp_path / "grid")
    config = project / DEMO_CONFIG
    text = config.read_text()
    old = "{name: lasso, kind: l1, grid: [0.003, 0.01, 0.03, 0.1, 0.3, 1.0]}"
    assert old in text
    config.write_text(text.replace(old, "{name: lasso, kind: l1, grid: [0.003, 0.01, 0.03, 0.1, 0.3, 1.0, 3.0]}"))
    rerun = _tail(every_job, "fit[lasso]", "compare", "threshold", "evaluate", "apply_cutoff", "model_figures")
    # the gap reads every candidate's fold metrics and the selection; the trees read neither
    rerun |= {"challenger_gap"} & every_job
    assert planned(project, *targets(project), env=env) == rerun


@pytest.mark.e2e
def test_a_template_only_the_card_uses_reruns_card_and_manifest(built, every_job, tmp_path):
    """The manifest records the card rule's params and code hashes (the card writes no stamp),
    so it reruns too; nothing upstream does."""
    if "card" not in every_job:
        pytest.skip("this workflow renders no card")
    project, env = _copy(built, tmp_path / "card_template")
    with open(project / "reports" / "macros.html.j2", "a", encoding="utf-8") as handle:
        handle.write("{# an edit that changes the template's bytes #}\n")
    assert planned(project, *targets(project), env=env) == {"card", "manifest"} | ({"publish"} & every_job)


@pytest.mark.e2e
def test_the_url_fetcher_reruns_card_manifest_and_the_drift_page(built, every_job, tmp_path):
    """oddsmith/reporting/fetcher.py runs in the card rule and, as the drift page's URL fetcher, in the
    score rule: exactly those two and the manifest rerun."""
    if "card" not in every_job:
        pytest.skip("this workflow renders no card")
    project, env = _copy(built, tmp_path / "fetcher_module", with_package=True)
    with open(project / "oddsmith" / "reporting" / "fetcher.py", "a", encoding="utf-8") as handle:
        handle.write("\n# an edit that changes the fetcher module's bytes\n")
    assert planned(project, *targets(project), env=env) == {"card", "manifest"} | ({"score", "publish"} & every_job)


@pytest.mark.e2e
def test_the_manifest_module_reruns_manifest_and_card(built, every_job, tmp_path):
    project, env = _copy(built, tmp_path / "manifest_module", with_package=True)
    with open(project / "oddsmith" / "evidence" / "manifest.py", "a", encoding="utf-8") as handle:
        handle.write("\n# an edit that changes the manifest module's bytes\n")
    assert planned(project, *targets(project), env=env) == {"manifest"} | ({"card", "publish"} & every_job)


@pytest.mark.e2e
def test_the_metrics_module_reruns_from_fit_on_but_not_the_data_stages(built, every_job, tmp_path):
    project, env = _copy(built, tmp_path / "metrics_module", with_package=True)
    with open(project / "oddsmith" / "assessment" / "metrics.py", "a", encoding="utf-8") as handle:
        handle.write("\n# an edit that changes the metrics module's bytes\n")
    assert planned(project, *targets(project), env=env) == every_job - {"validate", "split", "features"}


@pytest.mark.e2e
def test_changed_data_after_a_failed_validation_is_checked_again(built, every_job, tmp_path):
    """validate refused the changed file, and Snakemake removed that job's outputs: the next
    build with the same file must run validate again (and stop again), not find the
    published build up to date and run nothing."""
    project, env = _copy(built, tmp_path / "failed")
    data = project / "data_demo" / "lease_applications.csv"
    data.write_text(data.read_text() + "1,2\n")  # a row cut short: validate refuses the file
    failed = run_snakemake(project, env=env, check=False)
    assert failed.returncode != 0 and "rule validate stopped (ContractError)" in failed.stderr
    assert not (project / RUN / "validated" / "data.parquet").exists()
    assert planned(project, env=env) == every_job


@pytest.mark.e2e
def test_one_changed_data_value_reruns_everything(built, every_job, tmp_path):
    project, env = _copy(built, tmp_path / "data")
    data = project / "data_demo" / "lease_applications.csv"
    lines = data.read_text().split("\n")
    header = lines[0].split(",")
    column = header.index("credit_score")
    row = lines[10].split(",")
    row[column] = str(int(row[column]) - 1 if int(row[column]) > 300 else int(row[column]) + 1)
    lines[10] = ",".join(row)
    data.write_text("\n".join(lines))
    assert planned(project, *targets(project), env=env) == every_job


# ---- the code fingerprint follows the imports (static checks, no workflow run) ----


def _write(folder: Path, files: dict[str, str]) -> None:
    for name, text in files.items():
        (folder / name).parent.mkdir(parents=True, exist_ok=True)
        (folder / name).write_text(text, encoding="utf-8")


def test_the_import_walk_reads_every_import_form(tmp_path):
    """A hand-made package: each import form reaches exactly the module it names, imports in
    function bodies and relative imports included; modules never imported stay out."""
    package = tmp_path / "oddsmith"
    _write(package, {
        "__init__.py": "", "stages/__init__.py": "",
        "stages/go.py": "import oddsmith.alpha\nfrom .. import beta\n",
        "alpha.py": "from oddsmith.gamma import g\n",
        "beta.py": "def f():\n    from oddsmith import delta\n    return delta\n",
        "gamma.py": "g = 1\nRESOURCE_FILES = ('reports/g.j2',)\n",
        "delta.py": "import json\nimport oddsmith.stages.go\n",
        "unused.py": "",
    })
    _write(tmp_path, {"scripts/go.py": "from oddsmith.stages.go import *\n"})
    modules, resources = code_closure(tmp_path / "scripts" / "go.py", root=package)
    assert modules == ["__init__", "alpha", "beta", "delta", "gamma", "stages/__init__", "stages/go"]
    assert resources == ["reports/g.j2"]


def _fingerprints(package: Path) -> dict[str, str]:
    return {script.stem: script_fingerprint(f"scripts/{script.name}", root=package)
            for script in sorted((ROOT / "scripts").glob("*.py"))}


@pytest.fixture()
def project_copy(tmp_path, monkeypatch) -> Path:
    """The scripts, templates, schemas and a copy of the package, as the current folder."""
    for part in ("scripts", "reports", "schemas", "oddsmith"):
        shutil.copytree(ROOT / part, tmp_path / part, ignore=shutil.ignore_patterns("__pycache__"))
    monkeypatch.chdir(tmp_path)
    return tmp_path


def _changed_by(project: Path, path: str) -> set[str]:
    before = _fingerprints(project / "oddsmith")
    with open(project / path, "a", encoding="utf-8") as handle:
        handle.write("\n# an edit that changes the file's bytes\n")
    clear_code_cache()
    after = _fingerprints(project / "oddsmith")
    return {name for name in before if before[name] != after[name]}


@pytest.mark.parametrize(("path", "rules"), [
    # the scripts that import oddsmith.assessment.metrics, directly or through another module
    ("oddsmith/assessment/metrics.py", {"fit", "compare", "challenger_fit", "challenger_gap", "threshold", "evaluate", "apply_cutoff", "refit"}),
    # ranks with ties: the metrics (DeLong) and the features stage's leakage screen
    ("oddsmith/assessment/ranks.py", {"features", "fit", "compare", "challenger_fit", "challenger_gap", "threshold", "evaluate",
                                      "apply_cutoff", "refit"}),
    # the card's renderer runs in the card rule only; the URL fetcher also renders the drift page
    ("oddsmith/reporting/card.py", {"card"}),
    ("oddsmith/reporting/card_findings.py", {"card"}),
    ("oddsmith/reporting/fetcher.py", {"card", "score"}),
    ("oddsmith/evidence/manifest.py", {"manifest", "publish"}),
    # the artifact registry: the card reads through it, the manifest names its own file from it,
    # evaluate, apply_cutoff and the figures join the evaluation files through it
    ("oddsmith/artifacts.py", {"evaluate", "apply_cutoff", "model_figures", "figures", "subgroup_figure", "card", "manifest",
                               "publish"}),
    ("oddsmith/io.py", {"validate", "split", "features", "fit", "compare", "challenger_fit", "challenger_gap",
                        "threshold", "evaluate", "apply_cutoff", "model_figures", "figures", "subgroup_figure", "manifest", "card", "score",
                        "publish", "refit"}),
    ("reports/macros.html.j2", {"card"}),
    ("reports/model_card.css", {"card", "score"}),
    ("reports/drift.html.j2", {"score"}),
    # the candidate defaults and the cost vocabulary are read from the schema (oddsmith.settings)
    ("schemas/config.schema.yaml", {"fit", "challenger_fit", "challenger_gap", "threshold", "evaluate", "apply_cutoff", "score", "refit"}),
    ("scripts/split.py", {"split"}),
])
def test_an_edit_changes_exactly_the_fingerprints_of_the_rules_that_run_it(project_copy, path, rules):
    assert _changed_by(project_copy, path) == rules


def test_the_statement_scan_finds_the_imports_a_full_parse_finds():
    """The walk parses only the lines that start an import (for speed): on every file of the
    package and every script it finds exactly the import statements of a full parse."""
    import ast

    def dumps(nodes):
        return sorted(ast.dump(n) for n in nodes if isinstance(n, (ast.Import, ast.ImportFrom)))

    for path in sorted([*(ROOT / "oddsmith").rglob("*.py"), *(ROOT / "scripts").glob("*.py")]):
        source = path.read_text(encoding="utf-8")
        assert dumps(import_statements(source)) == dumps(ast.walk(ast.parse(source))), path


def test_every_rule_fingerprints_the_script_it_runs():
    """``code=code(script=...)`` names the rule's own script: no hand-kept module lists."""
    found = {}
    for smk in sorted((ROOT / "rules").glob("*.smk")):
        for block in re.split(r"(?m)^\s*rule ", smk.read_text(encoding="utf-8"))[1:]:
            code = re.search(r"code=code\((.*?)\)", block, re.S)
            script = re.search(r'script:\s*"\.\./([^"]+)"', block)
            if script:
                found[block.split(":", 1)[0].strip()] = code and code.group(1)
                assert code and code.group(1) == f'script="{script.group(1)}"', block[:200]
    assert {"validate", "fit", "threshold", "evaluate", "manifest", "card", "publish"} <= set(found)
