"""Shared fixtures: the repository root, demo config, and project copies for workflow runs.

A build reads exactly one configuration file; ``run_snakemake`` passes the demo's
(``config/demo.yaml``) unless told another (``config=``) or none (``config=None``)."""

from __future__ import annotations

import copy
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

ROOT = Path(__file__).resolve().parent.parent
BIN = Path(sys.executable).parent
DEMO_CONFIG = "config/demo.yaml"
PROJECT_PARTS = ("Snakefile", "rules", "scripts", "schemas", "config", "reports", "data_demo")


@pytest.fixture(scope="session")
def root() -> Path:
    return ROOT


@pytest.fixture()
def demo_config() -> dict:
    return copy.deepcopy(yaml.safe_load((ROOT / DEMO_CONFIG).read_text()))


def copy_project(dest: Path) -> Path:
    """Copy what a build needs (not results, not .snakemake) into ``dest``."""
    dest.mkdir(parents=True, exist_ok=True)
    for part in PROJECT_PARTS:
        src = ROOT / part
        if src.is_dir():
            shutil.copytree(src, dest / part, ignore=shutil.ignore_patterns("__pycache__"))
        elif src.exists():
            shutil.copy2(src, dest / part)
    return dest


def run_snakemake(project: Path, *args, env=None, check=True, config: str | None = DEMO_CONFIG) -> subprocess.CompletedProcess:
    """Run the project's workflow with this interpreter's Snakemake and one configuration file."""
    full_env = dict(os.environ)
    full_env.setdefault("SOURCE_DATE_EPOCH", "1767225600")
    full_env.update(env or {})
    cmd = [str(BIN / "snakemake"), "--cores", "2", "--nocolor", *args]
    if config is not None:
        cmd += ["--configfile", config]
    result = subprocess.run(cmd, cwd=project, env=full_env, capture_output=True, text=True)
    if check and result.returncode != 0:
        raise AssertionError(f"snakemake failed ({result.returncode}):\n{result.stdout[-4000:]}\n{result.stderr[-6000:]}")
    return result


@pytest.fixture()
def project(tmp_path) -> Path:
    """A fresh copy of the project in a temporary folder."""
    return copy_project(tmp_path / "project")


@pytest.fixture(scope="session")
def demo_build(tmp_path_factory) -> Path:
    """The full demo analysis, built once per test session in a temporary folder."""
    project = copy_project(tmp_path_factory.mktemp("demo") / "project")
    run_snakemake(project)
    return project


# ---- a small hand-made run folder, built the way the workflow builds one ----

def write_job(project: Path, run_dir: Path, rule: str, name: str, outputs: dict, inputs: list[str]) -> None:
    """Write a job's outputs and its stamp as ``oddsmith.runner`` does (paths relative to ``project``)."""
    from oddsmith.io import sha256_bytes, sha256_file, write_json

    prefix = run_dir.relative_to(project).as_posix()
    for rel, data in outputs.items():
        (run_dir / rel).parent.mkdir(parents=True, exist_ok=True)
        (run_dir / rel).write_bytes(data)
    write_json(run_dir / "provenance" / f"{name}.json", {
        "rule": rule, "wildcards": {"run": run_dir.name},
        "inputs": {p: sha256_file(project / p) for p in inputs},
        "outputs": {f"{prefix}/{rel}": sha256_bytes(d) for rel, d in outputs.items()},
        "params_sha256": sha256_bytes(b"p" + rule.encode()), "code_sha256": sha256_bytes(b"c" + rule.encode())})


def write_card(run_dir: Path, text: str = "card") -> None:
    """A stand-in card bound to the folder's manifest (``card/card.sha256`` as the card rule writes it)."""
    from oddsmith.io import sha256_file

    card = run_dir / "card"
    card.mkdir(exist_ok=True)
    (card / "model_card.html").write_text(f"<html>{text}</html>\n")
    (card / "model_card.pdf").write_bytes(f"%PDF-1.7 {text}\n".encode())
    lines = [f"{sha256_file(run_dir / 'manifest.json')}  manifest.json"] + [
        f"{sha256_file(card / n)}  card/{n}" for n in ("model_card.html", "model_card.pdf")]
    (card / "card.sha256").write_text("\n".join(lines) + "\n")


def small_build(project: Path, run: str = "demo", *, model: bytes = b'{"b": 1}\n', card: str = "card") -> Path:
    """``work/<run>`` with two jobs (validate, fit), a manifest and a card; returns the folder."""
    from oddsmith.evidence.manifest import build_manifest
    from oddsmith.io import write_json

    run_dir = project / "work" / run
    (project / "data").mkdir(parents=True, exist_ok=True)
    (project / "data" / "raw.csv").write_text("id,y\n1,0\n2,1\n")
    write_job(project, run_dir, "validate", "validate", {"validated/data.txt": b"typed\n"}, ["data/raw.csv"])
    write_job(project, run_dir, "fit", "fit-a", {"candidates/a/model.json": model, "candidates/a/cv.json": b"{}\n"},
              [f"work/{run}/validated/data.txt"])
    old = Path.cwd()
    os.chdir(project)
    try:
        manifest = build_manifest(run=run, run_dir=f"work/{run}",
                                  stamps=[f"work/{run}/provenance/validate.json", f"work/{run}/provenance/fit-a.json"],
                                  raw_inputs={"data/raw.csv": "data"}, config={"run": run, "card": {"version": "1.0.0"}},
                                  build={"source_date_epoch": 0, "git": None})
    finally:
        os.chdir(old)
    write_json(run_dir / "manifest.json", manifest)
    write_card(run_dir, card)
    return run_dir
