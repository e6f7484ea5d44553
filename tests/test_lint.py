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
