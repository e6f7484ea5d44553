"""The job frame: a project error reaches the terminal as one readable block (full detail and
traceback in the rule's log), a bug keeps its traceback, and no stamp is written."""

from __future__ import annotations

import io
import logging
import sys
from types import SimpleNamespace

import pytest

from oddsmith.errors import ContractError
from oddsmith import runner
from oddsmith.runner import stage


class _Named(dict):
    """The part of Snakemake's named lists that stage() uses."""

    def __getattr__(self, name):
        return self[name]


def _job(tmp_path):
    return SimpleNamespace(log=[str(tmp_path / "logs" / "validate.log")], threads=1, rule="validate",
                           output=_Named(stamp=str(tmp_path / "stamp.json")), input=_Named(), params=_Named(),
                           wildcards=_Named())


@pytest.fixture()
def terminal(monkeypatch):
    """The job's original stderr, captured; stderr and logging are restored afterwards."""
    captured = io.StringIO()
    monkeypatch.setattr(sys, "__stderr__", captured)
    monkeypatch.setattr(sys, "stderr", sys.stderr)
    yield captured
    logging.basicConfig(stream=sys.stderr, force=True)


def _refuse():
    raise ContractError("data.csv: 2 problem(s) against the data contract",
                        ["column 'credit_score', check type: expected a number: 1 row(s) fail, e.g. LA-5='high'",
                         "column 'region', check isin: 1 row(s) fail, e.g. LA-7='moon'"])


def test_project_error_is_one_block_on_the_terminal_and_detail_in_the_log(tmp_path, terminal):
    job = _job(tmp_path)
    with pytest.raises(SystemExit) as stop:
        stage(job, _refuse)
    assert stop.value.code == 1
    shown = terminal.getvalue()
    assert "oddsmith: rule validate stopped (ContractError)" in shown
    assert "column 'credit_score'" in shown and "LA-7='moon'" in shown  # every problem, with row ids
    assert "Traceback" not in shown and str(tmp_path / "logs" / "validate.log") in shown
    log = (tmp_path / "logs" / "validate.log").read_text()
    assert "Traceback" in log and "column 'region'" in log
    assert not (tmp_path / "stamp.json").exists()


def test_a_bug_keeps_its_traceback_and_shows_no_block(tmp_path, terminal):
    def broken():
        return {}["missing"]

    with pytest.raises(KeyError):
        stage(_job(tmp_path), broken)
    assert terminal.getvalue() == ""
    assert not (tmp_path / "stamp.json").exists()


def test_jobs_tune_glibc_allocator_and_carry_on_without_it(monkeypatch):
    import ctypes
    import platform

    from oddsmith import runner

    def no_library(name):
        raise OSError(f"{name}: not found")

    with monkeypatch.context() as patched:
        patched.setattr(ctypes, "CDLL", no_library)
        assert runner.tune_allocator() is False
    if platform.libc_ver()[0] != "glibc":
        pytest.skip(f"the allocator settings are glibc's; this C library is {platform.libc_ver()[0]!r}")
    assert runner.tune_allocator() is True
    assert runner.ALLOCATOR_SETTINGS[-3] <= runner.ALLOCATOR_SETTINGS[-1]


def test_only_the_fit_and_bootstrap_rules_tune_the_allocator(tmp_path, monkeypatch):
    # Memory kept for reuse counts in a job's peak: features peaked above 2.5 x its data with it.
    from oddsmith import runner

    tuned = []
    monkeypatch.setattr(runner, "tune_allocator", lambda: tuned.append(True) or True)
    for rule in ("validate", "features", "fit", "challenger_fit", "threshold", "evaluate", "apply_cutoff", "card"):
        job = _job(tmp_path)
        job.rule = rule
        tuned.clear()
        runner.stage(job, lambda: None)
        assert bool(tuned) == (rule in ("fit", "challenger_fit", "evaluate", "apply_cutoff")), rule


def test_idle_timers_are_cancelled_so_the_process_need_not_wait_for_them():
    """Snakemake's rate limiter leaves non-daemon Timers behind; the build's end cancels them
    (the interpreter would otherwise wait up to their interval before it exits)."""
    import threading

    fired = []
    timer = threading.Timer(600, lambda: fired.append(True))
    timer.start()
    assert runner.cancel_idle_timers() >= 1
    timer.join(timeout=5)
    assert not timer.is_alive() and fired == []
    assert runner.cancel_idle_timers() == 0
