"""The manifest: building it from job stamps on small hand-made folders (every file claimed, no
stale or partial file, relative paths only), the build facts (git state, SOURCE_DATE_EPOCH,
environment), and the manifest of the real demo build."""

from __future__ import annotations

import json
import os
import subprocess
from pathlib import Path

import pytest

from oddsmith.config import check_config, read_config_file
from oddsmith.errors import ManifestError
from oddsmith.evidence.manifest import (FORMAT, GIT_OVERRIDE_ENV, build_manifest, environment, git_state,
                               source_date_epoch, unsafe_path_reason)
from oddsmith.io import canonical_json, sha256_bytes, sha256_file, write_json

from conftest import DEMO_CONFIG, run_snakemake

RUN = "demo"
BUILD = {"source_date_epoch": 1767225600, "git": None}


def _job(project: Path, rule: str, outputs: dict, inputs: dict, stamp_name: str | None = None) -> Path:
    """Write a job's outputs and its stamp the way oddsmith.runner does."""
    run_dir = project / "results" / RUN
    for rel, data in outputs.items():
        (run_dir / rel).parent.mkdir(parents=True, exist_ok=True)
        (run_dir / rel).write_bytes(data)
    stamp = run_dir / "provenance" / f"{stamp_name or rule}.json"
    write_json(stamp, {
        "rule": rule, "wildcards": {"run": RUN},
        "inputs": {p: sha256_file(project / p) for p in inputs},
        "outputs": {f"results/{RUN}/{rel}": sha256_bytes(data) for rel, data in outputs.items()},
        "params_sha256": sha256_bytes(rule.encode()), "code_sha256": sha256_bytes(b"code " + rule.encode()),
    })
    return stamp


def _small_project(project: Path) -> list[Path]:
    (project / "data").mkdir(parents=True)
    (project / "data" / "raw.csv").write_text("id,y\n1,0\n2,1\n")
    (project / "config.yaml").write_text("run: demo\n")
    first = _job(project, "validate", {"validated/data.txt": b"typed rows\n"}, ["data/raw.csv"])
    second = _job(project, "fit", {"candidates/a/model.json": b'{"b": 1}\n'},
                  [f"results/{RUN}/validated/data.txt"], stamp_name="fit-a")
    return [first, second]


def _build(project: Path, stamps, **options) -> dict:
    old = Path.cwd()
    os.chdir(project)
    try:
        return build_manifest(run=RUN, run_dir=f"results/{RUN}", stamps=[Path(s).relative_to(project) for s in stamps],
                              raw_inputs={"data/raw.csv": "data", "config.yaml": "config"}, config={"run": RUN},
                              build=BUILD, **options)
    finally:
        os.chdir(old)


def test_every_file_is_joined_with_the_stamp_of_its_job(tmp_path):
    project = tmp_path / "p"
    stamps = _small_project(project)
    manifest = _build(project, stamps)
    assert manifest["format"] == FORMAT == "oddsmith-manifest/1"
    assert set(manifest["files"]) == {"validated/data.txt", "candidates/a/model.json",
                                      "provenance/validate.json", "provenance/fit-a.json"}
    model = manifest["files"]["candidates/a/model.json"]
    assert model["rule"] == "fit" and model["stamp"] == "provenance/fit-a.json"
    assert model["sha256"] == sha256_bytes(b'{"b": 1}\n') and model["size"] == 9
    assert model["inputs"] == {f"results/{RUN}/validated/data.txt": sha256_bytes(b"typed rows\n")}
    assert model["code_sha256"] == sha256_bytes(b"code fit")
    assert manifest["raw_inputs"]["data/raw.csv"] == {"sha256": sha256_file(project / "data/raw.csv"), "size": 13,
                                                      "role": "data"}
    assert list(manifest["raw_inputs"]) == ["config.yaml", "data/raw.csv"]
    assert manifest["release"] is None and manifest["git"] is None and manifest["source_date_epoch"] == 1767225600


def test_same_inputs_in_another_folder_give_the_same_bytes(tmp_path):
    first = _small_project(tmp_path / "one")
    second = _small_project(tmp_path / "elsewhere" / "two")
    a = canonical_json(_build(tmp_path / "one", first))
    b = canonical_json(_build(tmp_path / "elsewhere" / "two", second))
    assert a == b
    assert str(tmp_path).encode() not in a


def test_a_file_no_job_wrote_stops_the_manifest(tmp_path):
    project = tmp_path / "p"
    stamps = _small_project(project)
    (project / "results" / RUN / "candidates" / "old").mkdir()
    (project / "results" / RUN / "candidates" / "old" / "model.json").write_text("{}")
    with pytest.raises(ManifestError, match=r"candidates/old/model.json is in the run folder but no job"):
        _build(project, stamps)
    assert not (project / "results" / RUN / "manifest.json").exists()


def test_a_file_changed_after_its_job_stops_the_manifest(tmp_path):
    project = tmp_path / "p"
    stamps = _small_project(project)
    (project / "results" / RUN / "validated" / "data.txt").write_bytes(b"typed rowz\n")
    with pytest.raises(ManifestError, match=r"validated/data.txt changed after its job finished"):
        _build(project, stamps)


def test_remembered_hashes_are_used_but_never_hide_a_changed_file(tmp_path):
    """With the workflow's remembered hashes the manifest equals one that read every file, and a
    file changed after its job (new state) is read again and refused all the same."""
    project = tmp_path / "p"
    stamps = _small_project(project)
    cache = project / ".snakemake" / "hashes.json"
    data = project / "results" / RUN / "validated" / "data.txt"
    assert _build(project, stamps, hash_cache=cache) == _build(project, stamps)  # reads and remembers
    assert _build(project, stamps, hash_cache=cache) == _build(project, stamps)  # remembered
    remembered = json.loads(cache.read_text())
    assert str(project / "data" / "raw.csv") in remembered and str(data) in remembered
    data.write_bytes(b"typed rowz\n")
    with pytest.raises(ManifestError, match=r"validated/data.txt changed after its job finished"):
        _build(project, stamps, hash_cache=cache)


def test_partial_writes_are_removed_and_symlinks_refused(tmp_path):
    project = tmp_path / "p"
    stamps = _small_project(project)
    partial = project / "results" / RUN / "candidates" / "a" / ".model.json.k2j3.part"
    partial.write_bytes(b'{"b": ')
    manifest = _build(project, stamps)
    assert not partial.exists() and ".model.json.k2j3.part" not in json.dumps(manifest)
    (project / "results" / RUN / "link.json").symlink_to(project / "config.yaml")
    with pytest.raises(ManifestError, match=r"link.json is a symlink"):
        _build(project, stamps)


def test_card_folder_is_left_to_card_sha256(tmp_path):
    project = tmp_path / "p"
    stamps = _small_project(project)
    (project / "results" / RUN / "card").mkdir()
    (project / "results" / RUN / "card" / "model_card.html").write_text("<html></html>")
    assert not any(p.startswith("card/") for p in _build(project, stamps)["files"])


def test_stamp_naming_an_output_outside_the_run_is_refused(tmp_path):
    project = tmp_path / "p"
    stamps = _small_project(project)
    record = json.loads(stamps[0].read_text())
    record["outputs"]["results/other/x.txt"] = "0" * 64
    write_json(stamps[0], record)
    with pytest.raises(ManifestError, match=r"outside results/demo/"):
        _build(project, stamps)


@pytest.mark.parametrize("path,reason", [
    ("a/b.json", None), ("../x", "contains .."), ("a/../../x", "contains .."), ("/etc/passwd", "is absolute"),
    ("C:/x", "is absolute"), ("a\\b", "contains a backslash or NUL"), ("a//b", "has an empty or '.' component"),
    ("./a", "has an empty or '.' component"), ("", "is not a non-empty string"), (3, "is not a non-empty string"),
])
def test_unsafe_paths_are_named(path, reason):
    assert unsafe_path_reason(path) == reason


def test_environment_names_versions_but_not_the_host():
    import platform

    import numpy

    env = environment()
    assert env["libraries"]["numpy"] == numpy.__version__
    assert env["platform"] == f"{platform.system()}-{platform.machine()}"
    assert platform.node() not in json.dumps(env)
    assert list(env["libraries"]) == sorted(env["libraries"])


def test_environment_reads_the_same_names_and_versions_as_a_full_metadata_parse():
    """environment() reads only the header block of each distribution's metadata; the result
    equals what importlib.metadata's full parse gives for every installed distribution."""
    import importlib.metadata

    from oddsmith.evidence.manifest import _canonical_name

    full = {}
    for dist in importlib.metadata.distributions():
        if dist.metadata["Name"]:
            full.setdefault(_canonical_name(dist.metadata["Name"]), dist.version)
    assert environment()["libraries"] == dict(sorted(full.items()))
    assert len(full) > 20


def _git(repo: Path, *args):
    env = dict(os.environ, GIT_AUTHOR_NAME="t", GIT_AUTHOR_EMAIL="t@example.org", GIT_COMMITTER_NAME="t",
               GIT_COMMITTER_EMAIL="t@example.org", GIT_COMMITTER_DATE="1700000000 +0000",
               GIT_AUTHOR_DATE="1700000000 +0000")
    return subprocess.run(["git", "-C", str(repo), *args], check=True, capture_output=True, text=True, env=env).stdout


def test_git_state_and_source_date_epoch(tmp_path, monkeypatch):
    monkeypatch.delenv("SOURCE_DATE_EPOCH", raising=False)
    monkeypatch.delenv(GIT_OVERRIDE_ENV, raising=False)
    repo = tmp_path / "repo"
    repo.mkdir()
    assert git_state(repo) is None
    assert source_date_epoch(repo) == (0, "fallback 0 (no SOURCE_DATE_EPOCH and no git history)")
    _git(repo, "init", "-q")
    (repo / "Snakefile").write_text("a\n")
    _git(repo, "add", "Snakefile")
    _git(repo, "commit", "-q", "-m", "first")
    head = _git(repo, "rev-parse", "HEAD").strip()
    assert git_state(repo) == {"commit": head, "dirty": False}
    assert source_date_epoch(repo) == (1700000000, "time of the last commit")
    (repo / "Snakefile").write_text("b\n")
    assert git_state(repo) == {"commit": head, "dirty": True}
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1767225600")
    assert source_date_epoch(repo)[0] == 1767225600
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "yesterday")
    with pytest.raises(ManifestError, match="whole number of seconds, got 'yesterday'"):
        source_date_epoch(repo)
    monkeypatch.setenv(GIT_OVERRIDE_ENV, '{"commit": "abc", "dirty": true}')
    assert git_state(repo) == {"commit": "abc", "dirty": True}
    monkeypatch.setenv(GIT_OVERRIDE_ENV, "dirty")
    with pytest.raises(ManifestError, match=GIT_OVERRIDE_ENV):
        git_state(repo)


def _committed_project(repo: Path) -> str:
    """A repository holding one file of each kind of code, committed; returns the commit."""
    for rel in ("oddsmith/assessment/metrics.py", "Snakefile", "rules/fit.smk", "scripts/fit.py", "reports/card.html.j2",
                "schemas/config.schema.yaml", "schemas/contracts/demo.yaml", "pyproject.toml", "config/demo.yaml",
                "data_demo/rows.csv"):
        (repo / rel).parent.mkdir(parents=True, exist_ok=True)
        (repo / rel).write_text("committed\n")
    _git(repo, "init", "-q")
    _git(repo, "add", ".")
    _git(repo, "commit", "-q", "-m", "first")
    return _git(repo, "rev-parse", "HEAD").strip()


@pytest.mark.parametrize("rel", ["data/applications.csv", "config/applications.yaml", "schemas/contracts/applications.yaml",
                                 "config/demo.yaml", "data_demo/rows.csv", "notes.txt", "tests/test_new.py"])
def test_data_and_config_files_are_not_uncommitted_code(tmp_path, monkeypatch, rel):
    """Untracked or edited data, configuration and contract files leave the code clean (the
    manifest records them by hash as raw inputs)."""
    monkeypatch.delenv(GIT_OVERRIDE_ENV, raising=False)
    head = _committed_project(tmp_path)
    (tmp_path / rel).parent.mkdir(parents=True, exist_ok=True)
    (tmp_path / rel).write_text("the user's own\n")
    assert git_state(tmp_path) == {"commit": head, "dirty": False}


@pytest.mark.parametrize("rel", ["oddsmith/assessment/metrics.py", "oddsmith/new_module.py", "Snakefile", "rules/fit.smk",
                                 "rules/extra.smk", "scripts/fit.py", "reports/card.html.j2",
                                 "schemas/config.schema.yaml", "pyproject.toml", "requirements.lock"])
def test_edited_or_added_code_is_uncommitted_code(tmp_path, monkeypatch, rel):
    monkeypatch.delenv(GIT_OVERRIDE_ENV, raising=False)
    head = _committed_project(tmp_path)
    (tmp_path / rel).parent.mkdir(parents=True, exist_ok=True)
    (tmp_path / rel).write_text("changed\n")
    assert git_state(tmp_path) == {"commit": head, "dirty": True}


# ---- the manifest of the real demo build ----

def build_targets(project: Path) -> list[str]:
    """The default target plus the manifest (and the card, when the workflow has one)."""
    rules = run_snakemake(project, "--list-rules").stdout.split()
    return ["all", "work/lease_demo/manifest.json"] + (["work/lease_demo/card/card.sha256"] if "card" in rules else [])


@pytest.fixture(scope="module")
def demo_run(demo_build) -> Path:
    run_snakemake(demo_build, *build_targets(demo_build))
    return demo_build / "results" / "lease_demo"


@pytest.mark.e2e
def test_demo_manifest_covers_every_artifact(demo_run, demo_build):
    raw = (demo_run / "manifest.json").read_bytes()
    manifest = json.loads(raw)
    assert raw == canonical_json(manifest)
    assert {"format", "run", "config", "config_sha256", "files", "raw_inputs", "environment", "git",
            "source_date_epoch", "release"} <= set(manifest)
    on_disk = {p.relative_to(demo_run).as_posix() for p in demo_run.rglob("*") if p.is_file()}
    expected = {p for p in on_disk if not p.startswith("card/") and p != "manifest.json"}
    assert set(manifest["files"]) == expected
    for rel, entry in manifest["files"].items():
        assert entry["sha256"] == sha256_file(demo_run / rel), rel
        assert entry["rule"] and entry["stamp"].startswith("provenance/"), rel
    assert manifest["files"]["candidates/lasso/model.json"]["stamp"] == "provenance/fit-lasso.json"
    roles = {"data_demo/lease_applications.csv": "data", DEMO_CONFIG: "config",
             "schemas/contracts/lease_applications.yaml": "contract"}
    if manifest["config"].get("scoring", {}).get("data"):
        roles[manifest["config"]["scoring"]["data"]] = "scoring batch"
    assert {path: entry["role"] for path, entry in manifest["raw_inputs"].items()} == roles
    for path, entry in manifest["raw_inputs"].items():
        assert entry["sha256"] == sha256_file(demo_build / path), path
    resolved = check_config(read_config_file(demo_build / DEMO_CONFIG), project_dir=demo_build)
    assert manifest["config"] == json.loads(canonical_json(resolved))
    assert manifest["source_date_epoch"] == 1767225600 and manifest["git"] is None
    assert str(demo_build).encode() not in raw and b"/tmp/" not in raw


@pytest.mark.e2e
def test_demo_card_is_bound_to_the_manifest(demo_run):
    if not (demo_run / "card").is_dir():
        pytest.skip("this workflow renders no card")
    lines = (demo_run / "card" / "card.sha256").read_text().splitlines()
    listed = {path: digest for digest, path in (line.split("  ", 1) for line in lines)}
    assert listed["manifest.json"] == sha256_file(demo_run / "manifest.json")
    for rel in ("card/model_card.html", "card/model_card.pdf"):
        assert listed[rel] == sha256_file(demo_run / rel)
