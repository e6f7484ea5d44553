"""oddsmith installed as a package (not from a checkout): a wheel in a fresh virtual environment
runs its command line and the workflow from another folder, with templates and schemas from
the installed package data; an editable install uses the checkout's own folders.

Nothing is downloaded: the fresh environment sees the locked dependencies of the running
interpreter through a ``.pth`` file listing its site-packages folders.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from conftest import PROJECT_PARTS, ROOT

RUN = "results/lease_demo"
#: What building the distribution needs from the checkout.
SOURCE_PARTS = ("pyproject.toml", "README.md", "oddsmith", "reports", "schemas")


def _copy(parts, dest: Path) -> Path:
    dest.mkdir(parents=True)
    for part in parts:
        src = ROOT / part
        if src.is_dir():
            shutil.copytree(src, dest / part, ignore=shutil.ignore_patterns("__pycache__", "*.egg-info", "build"))
        else:
            shutil.copy2(src, dest / part)
    return dest


def _clean_env(venv: Path) -> dict:
    """No PYTHONPATH (a checkout on it would shadow the installed package); the venv first on PATH."""
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "VIRTUAL_ENV")}
    env["PATH"] = os.pathsep.join([str(venv / "bin"), env.get("PATH", "")])
    env.setdefault("SOURCE_DATE_EPOCH", "1767225600")
    return env


def _run(cmd, *, cwd, env, expect=0) -> subprocess.CompletedProcess:
    done = subprocess.run([str(c) for c in cmd], cwd=cwd, env=env, capture_output=True, text=True)
    assert done.returncode == expect, f"{cmd} exited {done.returncode}:\n{done.stdout[-3000:]}\n{done.stderr[-5000:]}"
    return done


def _fresh_venv(path: Path, *, install: list, env: dict) -> Path:
    """A virtual environment without system site-packages, seeing the locked dependencies
    through a .pth file, with oddsmith installed by this interpreter's pip (offline)."""
    subprocess.run([sys.executable, "-m", "venv", "--without-pip", str(path)], check=True)
    purelib = subprocess.run([str(path / "bin" / "python"), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                             capture_output=True, text=True, check=True).stdout.strip()
    locked = [p for p in sys.path if Path(p).name == "site-packages" and Path(p).is_dir()]
    assert locked, "the running interpreter has no site-packages folder"
    (Path(purelib) / "oddsmith_test_locked_dependencies.pth").write_text("\n".join(locked) + "\n")
    _run([sys.executable, "-m", "pip", "--python", path / "bin" / "python", "install", "--quiet", "--no-deps",
          "--no-index", "--no-build-isolation", *install], cwd=path.parent, env=env)
    return Path(purelib)


def _imported_from(python: Path, module: str, *, cwd: Path, env: dict) -> Path:
    code = f"import importlib.util, pathlib; print(pathlib.Path(importlib.util.find_spec({module!r}).origin).resolve())"
    return Path(_run([python, "-c", code], cwd=cwd, env=env).stdout.strip())


@pytest.mark.e2e
def test_wheel_in_a_fresh_environment_verifies_and_builds(demo_build, tmp_path):
    source = _copy(SOURCE_PARTS, tmp_path / "source")
    _run([sys.executable, "-m", "pip", "wheel", "--quiet", "--no-deps", "--no-index", "--no-build-isolation",
          "-w", tmp_path / "wheels", source], cwd=tmp_path, env=_clean_env(tmp_path))
    wheel = next((tmp_path / "wheels").glob("oddsmith-*.whl"))
    venv = tmp_path / "venv"
    env = _clean_env(venv)
    purelib = _fresh_venv(venv, install=[wheel], env=env)
    shutil.rmtree(source)  # nothing may be read from the sources any more
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    python, oddsmith = venv / "bin" / "python", venv / "bin" / "oddsmith"

    version = _run([oddsmith, "--version"], cwd=elsewhere, env=env).stdout
    assert version.startswith("oddsmith 0.1.0 (") and f"({purelib / 'oddsmith'})" in version
    package = purelib / "oddsmith"
    assert _imported_from(python, "oddsmith", cwd=elsewhere, env=env) == package / "__init__.py"
    shipped = "from oddsmith import resources as r; print(r.template_dir()); print(r.schema_file('config.schema.yaml'))"
    assert _run([python, "-c", shipped], cwd=elsewhere, env=env).stdout.split() == [
        str(package / "_reports"), str(package / "_schemas" / "config.schema.yaml")]

    results = demo_build / RUN
    done = _run([oddsmith, "verify", results], cwd=elsewhere, env=env)
    assert "verified" in done.stdout.lower()
    rebuild = _run([oddsmith, "verify", results, "--rebuild"], cwd=elsewhere, env=env, expect=1)
    assert "is not an oddsmith project checkout (no Snakefile)" in rebuild.stderr + rebuild.stdout
    assert "--project DIR" in rebuild.stderr + rebuild.stdout

    # The workflow files without the package: rules/common.smk and every job import the installed one.
    project = _copy([p for p in PROJECT_PARTS if p != "oddsmith"], tmp_path / "project")
    assert not (project / "oddsmith").exists()
    assert _imported_from(python, "oddsmith", cwd=project, env=env) == package / "__init__.py"
    _run([python, "-m", "snakemake", "--cores", "2", "--nocolor", "--configfile", "config/demo.yaml"], cwd=project, env=env)
    _run([oddsmith, "verify", project / RUN], cwd=elsewhere, env=env)
    built = {p.relative_to(project / RUN): p.read_bytes() for p in sorted((project / RUN).rglob("*")) if p.is_file()}
    checkout = {p.relative_to(results): p.read_bytes() for p in sorted(results.rglob("*")) if p.is_file()}
    assert sorted(built) == sorted(checkout)
    assert [str(p) for p in built if built[p] != checkout[p]] == [], "the installed package built other bytes"


@pytest.mark.e2e
def test_editable_install_uses_the_checkouts_folders(tmp_path):
    source = _copy(SOURCE_PARTS, tmp_path / "source")
    venv = tmp_path / "venv"
    env = _clean_env(venv)
    _fresh_venv(venv, install=["--editable", source], env=env)
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    version = _run([venv / "bin" / "oddsmith", "--version"], cwd=elsewhere, env=env).stdout
    assert version == f"oddsmith 0.1.0 ({source / 'oddsmith'})\n"
    shipped = "from oddsmith import resources as r; print(r.template_dir()); print(r.schema_file('config.schema.yaml'))"
    assert _run([venv / "bin" / "python", "-c", shipped], cwd=elsewhere, env=env).stdout.split() == [
        str(source / "reports"), str(source / "schemas" / "config.schema.yaml")]
