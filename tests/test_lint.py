"""Workflow hygiene: Snakemake's linter and snakefmt are clean (apart from the linter's
suggestion to pin a conda environment or container per rule: oddsmith pins its whole
environment in requirements.lock instead)."""

import re
import subprocess
import sys
from pathlib import Path

from conftest import ROOT

BIN = Path(sys.executable).parent
ALLOWED_LINT = "Specify a conda environment or container for each rule."


def test_snakemake_lint_is_clean():
    result = subprocess.run([str(BIN / "snakemake"), "--lint", "--nocolor", "--configfile", "config/demo.yaml"], cwd=ROOT, capture_output=True, text=True)
    output = result.stdout + result.stderr
    findings = re.findall(r"^\s+\* (.+?):?$", output, flags=re.M)
    assert findings, "the linter printed nothing recognisable:\n" + output[-2000:]
    unexpected = sorted({f for f in findings if f.rstrip(":") != ALLOWED_LINT.rstrip(":")})
    assert not unexpected, output[-4000:]


def test_snakefmt_is_clean():
    files = ["Snakefile", *sorted(str(p.relative_to(ROOT)) for p in (ROOT / "rules").glob("*.smk"))]
    result = subprocess.run([str(BIN / "snakefmt"), "--check", *files], cwd=ROOT, capture_output=True, text=True)
    assert result.returncode == 0, result.stdout + result.stderr


# ---- package hygiene: one error convention, no private helper shared across modules ----

PACKAGE = ROOT / "oddsmith"
#: Hooks that json.loads calls and whose ValueError it turns into its own decoding error.
JSON_HOOKS = {("evidence/verify.py", "_no_duplicate_keys"), ("evidence/verify.py", "_no_constant")}


def _functions_raising(exc_names: set[str]):
    import ast

    for path in sorted(PACKAGE.rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for func in [n for n in ast.walk(tree) if isinstance(n, (ast.FunctionDef, ast.AsyncFunctionDef))]:
            for node in ast.walk(func):
                if isinstance(node, ast.Raise) and isinstance(node.exc, ast.Call) \
                        and isinstance(node.exc.func, ast.Name) and node.exc.func.id in exc_names:
                    yield str(path.relative_to(PACKAGE)), func.name, node.lineno


def test_anticipated_errors_are_the_projects_own():
    """A bare ValueError/TypeError escapes the command line's handler (it catches
    OddsmithError); argument problems raise oddsmith.errors.ArgumentError (also a ValueError)."""
    found = {(f, name, line) for f, name, line in _functions_raising({"ValueError", "TypeError"})
             if (f, name) not in JSON_HOOKS}
    assert found == set()


def test_no_private_name_is_imported_from_another_module():
    import ast

    found = []
    # a module is reached by its own name whichever subpackage holds it (``from oddsmith.data import split``)
    module_names = {p.stem for p in PACKAGE.rglob("*.py")} - {"__init__"}
    for path in sorted(PACKAGE.rglob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("oddsmith"):
                found += [f"{path.name}: {node.module}.{a.name}" for a in node.names
                          if a.name.startswith("_") and not a.name.startswith("__")]
            elif isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) \
                    and node.attr.startswith("_") and not node.attr.startswith("__") \
                    and node.value.id in module_names and node.value.id != path.stem:
                found.append(f"{path.name}: {node.value.id}.{node.attr}")
    assert found == []


def test_no_package_module_imports_snakemake():
    """Core modules are testable without Snakemake, and so are the stages: they receive paths and
    settings; only the scripts of scripts/ and rules/common.smk unpack Snakemake's objects."""
    import ast

    found = []
    for path in sorted(PACKAGE.rglob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            names = [a.name for a in node.names] if isinstance(node, ast.Import) else \
                [node.module or ""] if isinstance(node, ast.ImportFrom) else []
            found += [f"{path.relative_to(PACKAGE)}: {n}" for n in names if n.split(".")[0] == "snakemake"]
    assert found == []


def test_no_core_module_imports_a_stage():
    """The flow goes one way: stages read artifacts and call the core; a core module (data,
    fitting, assessment, evidence, reporting, use and the top-level helpers) never reaches back
    into a stage. The command line is the one other place that runs stage code."""
    import ast

    found = []
    for path in sorted(PACKAGE.rglob("*.py")):
        rel = path.relative_to(PACKAGE)
        if rel.parts[0] == "stages" or rel == Path("cli.py"):
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            names = [a.name for a in node.names] if isinstance(node, ast.Import) else \
                [node.module or ""] if isinstance(node, ast.ImportFrom) else []
            if isinstance(node, ast.ImportFrom) and node.module == "oddsmith":
                names = [f"oddsmith.{a.name}" for a in node.names]
            found += [f"{rel}: {n}" for n in names if n.startswith("oddsmith.stages")]
    assert found == []


def test_every_subpackage_is_packaged():
    """pyproject.toml names the packages to install one by one: a folder of the package that it
    leaves out would be missing from the wheel (tests/test_install.py builds one)."""
    import tomllib

    listed = set(tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["setuptools"]["packages"])
    folders = {".".join(p.parent.relative_to(ROOT).parts) for p in PACKAGE.rglob("__init__.py")}
    assert folders - listed == set()
