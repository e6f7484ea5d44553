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
