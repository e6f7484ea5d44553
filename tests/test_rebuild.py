"""Byte-identical rebuilds and interrupted builds.

All builds here run a snapshot of the package copied into the project (PYTHONPATH), so that
edits made to the checkout while the tests run cannot make two builds differ.

- Two clean builds in different folders, at different times, with different PYTHONHASHSEED
  and time zones, give the same bytes for every file (the second one is made by
  ``oddsmith verify --rebuild``, which must also report success).
- A build killed (SIGKILL, whole process group) during the fit stage leaves nothing a later
  build or ``verify`` accepts as complete; after ``--unlock`` the next build
  (``--rerun-incomplete``) finishes and verifies, with the same bytes as an uninterrupted build.
- A failed build never costs the last good result: after a good build, a build killed during
  the card stage, a build stopped by a broken data file and one stopped by a broken config
  leave ``results/<run>`` verifying with the same card, and say so on the terminal.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import signal
import subprocess
import time
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from oddsmith.evidence.verify import verify_results
from oddsmith.io import sha256_file

from conftest import BIN, DEMO_CONFIG, ROOT, copy_project, run_snakemake

pytestmark = pytest.mark.e2e
RUN = "results/lease_demo"  # the published result
STAGE = "work/lease_demo"  # where the jobs write
EPOCH = "1767225600"


def _targets(project: Path) -> list[str]:
    rules = run_snakemake(project, "--list-rules").stdout.split()
    return ["all", f"{STAGE}/manifest.json"] + ([f"{STAGE}/card/card.sha256"] if "card" in rules else [])


def _env(project: Path, **extra) -> dict:
    return {"PYTHONPATH": str(project), "SOURCE_DATE_EPOCH": EPOCH} | extra


def _snapshot(dest: Path) -> Path:
    project = copy_project(dest)
    shutil.copytree(ROOT / "oddsmith", project / "oddsmith", ignore=shutil.ignore_patterns("__pycache__"))
    return project


def _hashes(run_dir: Path) -> dict:
    return {p.relative_to(run_dir).as_posix(): sha256_file(p) for p in sorted(run_dir.rglob("*")) if p.is_file()}


@pytest.fixture(scope="module")
def first(tmp_path_factory) -> Path:
    """A clean build of a package snapshot (PYTHONHASHSEED=1, UTC)."""
    project = _snapshot(tmp_path_factory.mktemp("first") / "project")
    run_snakemake(project, *_targets(project), env=_env(project, PYTHONHASHSEED="1", TZ="UTC"))
    return project


@pytest.fixture(scope="module")
def rebuilt(first, tmp_path_factory) -> tuple[subprocess.CompletedProcess, Path]:
    """``oddsmith verify --rebuild`` of the first build, kept in another, deeper folder and run
    later with another hash seed and time zone."""
    keep = tmp_path_factory.mktemp("second") / "some" / "deeper" / "folder"
    env = dict(os.environ, PYTHONHASHSEED="2", TZ="Pacific/Auckland")
    env.pop("SOURCE_DATE_EPOCH", None)  # the rebuild must take it from the manifest
    result = subprocess.run([str(BIN / "oddsmith"), "verify", str(first / RUN), "--rebuild", "--project", str(first),
                             "--keep", str(keep)], capture_output=True, text=True, env=env)
    return result, keep


def test_verify_rebuild_reproduces_every_hash(rebuilt, first):
    result, _ = rebuilt
    assert result.returncode == 0, result.stdout + result.stderr
    assert result.stdout.strip().endswith("rebuild reproduced every hash")
    assert result.stdout.strip().splitlines()[-1].startswith(f"verified {first / RUN}: ")


def test_two_clean_builds_are_byte_identical(rebuilt, first):
    _, keep = rebuilt
    a, b = first / RUN, keep / STAGE  # the published result and the rebuild's staging folder
    assert a.resolve() != b.resolve()
    assert (a / "manifest.json").read_bytes() == (b / "manifest.json").read_bytes()
    if (a / "card").is_dir():
        assert (a / "card" / "card.sha256").read_bytes() == (b / "card" / "card.sha256").read_bytes()
    ha, hb = _hashes(a), _hashes(b)
    assert set(ha) == set(hb)
    assert [p for p in ha if ha[p] != hb[p]] == []
    assert str(first).encode() not in (a / "manifest.json").read_bytes()


def test_rebuild_refuses_raw_inputs_that_differ_from_the_record(first, tmp_path):
    project = shutil.copytree(first, tmp_path / "changed", symlinks=True,
                              ignore=shutil.ignore_patterns("results", "work", ".snakemake", "logs", "benchmarks"))
    with open(project / "data_demo" / "lease_applications.csv", "a", encoding="utf-8") as handle:
        handle.write("\n")
    result = subprocess.run([str(BIN / "oddsmith"), "verify", str(first / RUN), "--rebuild", "--project", str(project)],
                            capture_output=True, text=True)
    assert result.returncode == 1
    assert "cannot rebuild: raw input data_demo/lease_applications.csv in" in result.stdout
    assert "the results were built from" in result.stdout


def _kill_during(project: Path, log_glob: str, env: dict, *extra) -> float:
    """Start a build, SIGKILL its whole process group shortly after a job writing ``log_glob``
    starts; return when it started."""
    started = time.time()
    process = subprocess.Popen([str(BIN / "snakemake"), "--cores", "2", "--nocolor", *_targets(project), *extra,
                                "--configfile", DEMO_CONFIG],
                               cwd=project, env=dict(os.environ) | env, stdout=subprocess.DEVNULL,
                               stderr=subprocess.DEVNULL, start_new_session=True)
    try:
        while time.time() - started < 300:
            if any(p.stat().st_mtime >= started for p in project.glob(log_glob)):
                time.sleep(0.5)
                break
            assert process.poll() is None, "the build ended before the stage to interrupt"
            time.sleep(0.05)
        else:
            pytest.fail(f"no job writing {log_glob} started")
    finally:
        os.killpg(process.pid, signal.SIGKILL)
        process.wait()
    return started


def _no_truncated_artifact(run_dir: Path) -> None:
    """Every file under its final name is complete: JSON parses, Parquet reads."""
    for path in run_dir.rglob("*"):
        if path.name.startswith("."):
            continue
        if path.suffix == ".json":
            json.loads(path.read_text(encoding="utf-8"))
        elif path.suffix == ".parquet":
            pq.read_table(path)


def _resume(project: Path, env: dict, *, redo: str, at_least: int) -> None:
    """What a user does next. Snakemake either refuses the outputs the killed jobs left (naming
    them) or, where those jobs wrote nothing, plans them again; then unlock and rebuild."""
    dry = run_snakemake(project, "--dry-run", *_targets(project), env=env, check=False)
    text = dry.stdout + dry.stderr
    if dry.returncode != 0:
        assert "IncompleteFilesException" in text, text[-3000:]
    else:
        assert len(re.findall(rf"(?m)^(?:local)?rule {redo}:$", dry.stdout)) >= at_least, text[-3000:]
    run_snakemake(project, "--unlock", env=env)
    run_snakemake(project, "--rerun-incomplete", *_targets(project), env=env)


def test_killed_during_fit_resumes_to_the_same_bytes(first, tmp_path):
    project = _snapshot(tmp_path / "killed_fit")
    env = _env(project)
    _kill_during(project, "logs/lease_demo/fit/*.log", env)
    staging, run_dir = project / STAGE, project / RUN
    stamps = list((staging / "provenance").glob("fit-*.json"))
    assert len(stamps) < 7, "killed after the fit stage had finished"
    assert not (staging / "manifest.json").exists()
    assert verify_results(staging) and not run_dir.exists(), "nothing is published before the build finishes"
    _no_truncated_artifact(staging)
    _resume(project, env, redo="fit", at_least=7 - len(stamps))
    assert verify_results(run_dir) == []
    assert (run_dir / "manifest.json").read_bytes() == (first / RUN / "manifest.json").read_bytes()
    assert _hashes(run_dir) == _hashes(first / RUN)


def _good_build(first: Path, dest: Path) -> tuple[Path, dict, dict]:
    """A copy of the first build: the project, its environment and the published result's bytes."""
    project = shutil.copytree(first, dest, symlinks=True)
    assert verify_results(project / RUN) == []
    return project, _env(project), _hashes(project / RUN)


def _still_holds(project: Path, before: dict, output: str) -> None:
    """The published result is the good one, unchanged and verifying, and the terminal said so."""
    assert verify_results(project / RUN) == []
    assert _hashes(project / RUN) == before
    fingerprint = sha256_file(project / RUN / "manifest.json")
    assert f"results/lease_demo still holds the build of " in output, output[-3000:]
    assert f"(card fingerprint {fingerprint}); it verifies." in output, output[-3000:]


def test_killed_during_the_last_stage_keeps_the_last_good_result(first, tmp_path):
    """Costs change, the build reruns the tail and is killed while the card is being made:
    the staging folder holds no accepted card, results/<run> still holds the first build."""
    project, env, before = _good_build(first, tmp_path / "killed_card")
    config = project / DEMO_CONFIG
    config.write_text(config.read_text().replace("false_positive: 1200", "false_positive: 1500"))
    _kill_during(project, "logs/lease_demo/card.log", env)
    staging = project / STAGE
    _no_truncated_artifact(staging)
    problems = verify_results(staging)
    assert problems, "a half-finished build verified"
    assert any("card.sha256 was rendered from a different manifest" in p or "card/" in p for p in problems), problems
    assert verify_results(project / RUN) == [] and _hashes(project / RUN) == before
    _resume(project, env, redo="card", at_least=1)
    run_dir = project / RUN
    assert verify_results(run_dir) == []
    new_manifest = sha256_file(run_dir / "manifest.json")
    assert new_manifest != sha256_file(first / RUN / "manifest.json")
    assert f"{new_manifest}  manifest.json" in (run_dir / "card" / "card.sha256").read_text()


def test_a_broken_data_file_keeps_the_last_good_result(first, tmp_path):
    """The contract refuses the data; Snakemake has already deleted validate's old outputs, but
    only in the staging folder."""
    project, env, before = _good_build(first, tmp_path / "broken_data")
    data = project / "data_demo" / "lease_applications.csv"
    data.write_text(data.read_text().replace("LA-000010,", "LA-000009,", 1))
    done = run_snakemake(project, *_targets(project), env=env, check=False)
    assert done.returncode != 0
    assert not (project / STAGE / "validated" / "data.parquet").exists(), "the old validate outputs were not deleted"
    _still_holds(project, before, done.stderr)
    assert "the build failed; results/lease_demo still holds" in done.stderr


def test_a_broken_config_keeps_the_last_good_result(first, tmp_path):
    project, env, before = _good_build(first, tmp_path / "broken_config")
    targets = _targets(project)
    config = project / DEMO_CONFIG
    config.write_text(config.read_text().replace("false_positive: 1200", "false_positive: -1"))
    done = run_snakemake(project, *targets, env=env, check=False)
    assert done.returncode != 0 and "costs.false_positive" in done.stderr
    _still_holds(project, before, done.stderr)


def test_a_partial_target_says_which_result_is_current(first, tmp_path):
    project, env, before = _good_build(first, tmp_path / "partial")
    config = project / DEMO_CONFIG
    config.write_text(config.read_text().replace("false_positive: 1200", "false_positive: 1500"))
    done = run_snakemake(project, f"{STAGE}/threshold/choice.json", env=env)
    _still_holds(project, before, done.stderr)


def test_a_finished_build_whose_publication_was_lost_is_published_by_the_next_invocation(first, tmp_path):
    project, env, before = _good_build(first, tmp_path / "republish")
    shutil.rmtree(project / RUN)
    done = run_snakemake(project, env=env)
    assert "results/lease_demo now holds this build (card fingerprint " in done.stderr
    assert verify_results(project / RUN) == [] and _hashes(project / RUN) == before
    # the publication parameter returns to its ordinary value: one more, idempotent publication
    assert "the same result as before" in run_snakemake(project, env=env).stderr
    assert "Nothing to be done" in run_snakemake(project, "--dry-run", env=env).stdout
