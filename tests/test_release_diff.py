"""``oddsmith release`` and ``oddsmith diff`` on two demo builds that differ only in the cost
of a false positive: the diff shows only threshold-related changes; a release is read-only,
verifies, is a no-op when repeated and is never overwritten by different content."""

from __future__ import annotations

import json
import shutil
import stat
from pathlib import Path

import pytest

from oddsmith import artifacts
from oddsmith.cli import main
from oddsmith.evidence.diff import compare_folders, config_changes, differs, flatten, format_text
from oddsmith.evidence.release import ReleaseError, release
from oddsmith.evidence.verify import verify_results
from oddsmith.io import sha256_file

from conftest import DEMO_CONFIG, run_snakemake

RUN = "results/lease_demo"  # the published result
STAGE = "work/lease_demo"
EPOCH = "1767225600"


def _no_differences() -> dict:
    return {"config": [], "data": {"changed": False},
            "code": {"rules": [], "libraries": [], "environment": [], "git": {"changed": False}},
            "selected": {"changed": False}, "coefficients": [{"n_changed": 0, "in_a": True, "in_b": True}],
            "metrics": {"threshold_free": [], "at_cutoff": []}, "cutoff": [], "subgroups": {"flag_changes": []}}


def test_differs_sees_a_change_in_any_compared_section():
    assert not differs(_no_differences())
    changes = [("config", [{"key": "run"}]), ("data", {"changed": True}), ("cutoff", [{"name": "x"}]),
               ("selected", {"changed": True}), ("subgroups", {"flag_changes": [{"group": "g"}]}),
               ("coefficients", [{"n_changed": 1, "in_a": True, "in_b": True}]),
               ("coefficients", [{"n_changed": 0, "in_a": True, "in_b": False}])]
    for key, value in changes:
        assert differs(_no_differences() | {key: value}), key
    for key in ("rules", "libraries", "environment"):
        record = _no_differences()
        record["code"][key] = [{"x": 1}]
        assert differs(record), key
    record = _no_differences()
    record["code"]["git"]["changed"] = True
    assert differs(record)
    for key in ("threshold_free", "at_cutoff"):
        record = _no_differences()
        record["metrics"][key] = [{"name": "auc"}]
        assert differs(record), key


def test_flatten_keys_lists_of_named_items_by_name():
    config = {"costs": {"false_positive": 1200}, "candidates": [{"name": "lasso", "grid": [0.1, 1.0]}],
              "fairness": {"sensitive": ["age"]}}
    assert flatten(config) == {"candidates[lasso].grid": [0.1, 1.0], "costs.false_positive": 1200,
                               "fairness.sensitive": ["age"]}
    changed = {"costs": {"false_positive": 1500}, "candidates": [{"name": "lasso", "grid": [0.1, 1.0]}],
               "fairness": {"sensitive": ["age"], "segments": ["region"]}}
    assert config_changes(config, changed) == [
        {"key": "costs.false_positive", "change": "changed", "a": 1200, "b": 1500},
        {"key": "fairness.segments", "change": "added", "b": ["region"]}]


def _targets(project: Path) -> list[str]:
    rules = run_snakemake(project, "--list-rules").stdout.split()
    return ["all", f"{STAGE}/manifest.json"] + ([f"{STAGE}/card/card.sha256"] if "card" in rules else [])


@pytest.fixture(scope="module")
def two_builds(demo_build, tmp_path_factory) -> tuple[Path, Path]:
    """(A, B): A is the demo brought up to date, B is A with the false-positive cost raised."""
    root = tmp_path_factory.mktemp("costs")
    a = root / "a"
    shutil.copytree(demo_build, a, symlinks=True)
    run_snakemake(a, *_targets(a))
    b = root / "b"
    shutil.copytree(a, b, symlinks=True)
    config = b / DEMO_CONFIG
    assert "false_positive: 1200" in config.read_text()
    config.write_text(config.read_text().replace("false_positive: 1200", "false_positive: 1500"))
    run_snakemake(b, *_targets(b))
    return a / RUN, b / RUN


@pytest.mark.e2e
def test_diff_of_a_cost_change_names_only_threshold_related_changes(two_builds):
    a, b = two_builds
    diff = compare_folders(a, b)
    assert diff["verified"] == {"a": True, "b": True}
    assert [c["key"] for c in diff["config"]] == ["costs.false_positive"]
    assert not diff["data"]["changed"]
    assert diff["code"]["rules"] == [] and diff["code"]["libraries"] == [] and not diff["code"]["git"]["changed"]
    assert not diff["selected"]["changed"]
    assert all(block["n_changed"] == 0 for block in diff["coefficients"])
    assert diff["metrics"]["threshold_free"] == []
    assert {c["name"] for c in diff["metrics"]["at_cutoff"]} >= {"cutoff", "cost_per_1000"}
    cutoff = {c["name"]: c for c in diff["cutoff"]}
    assert cutoff["costs.false_positive"]["a"] == 1200 and cutoff["costs.false_positive"]["b"] == 1500
    # Bayes cut-off c_fp / (c_fp + c_fn) (Elkan 2001): 1200/7200 -> 1500/7500
    assert cutoff["bayes.cutoff"]["a"] == pytest.approx(1 / 6) and cutoff["bayes.cutoff"]["b"] == pytest.approx(0.2)

    text = format_text(diff)
    sections = {line.split(":")[0]: line for line in text.splitlines() if line and not line.startswith((" ", "A:", "B:"))}
    for title in ("data", "code", "selected candidate", "test metrics (threshold-free)"):
        assert sections[title].startswith(f"{title}: unchanged"), text
    assert all(s.startswith(f"{t}: unchanged") for t, s in sections.items() if t.startswith("coefficients of")), text
    config_lines = text.split("config:\n", 1)[1].split("\n")
    assert config_lines[0] == "  costs.false_positive: 1200 -> 1500" and not config_lines[1].startswith("  "), text
    for title in ("test metrics at the cut-off", "cut-off"):
        assert sections[title] == f"{title}:", text


@pytest.mark.e2e
def test_diff_json_from_the_command_line(two_builds, capsys):
    a, b = two_builds
    assert main(["diff", str(a), str(b), "--json"]) == 1  # they differ (diff(1) convention)
    assert json.loads(capsys.readouterr().out) == json.loads(json.dumps(compare_folders(a, b)))


@pytest.mark.e2e
def test_diff_exit_status_same_different_unverified(two_builds, tmp_path, capsys):
    a, b = two_builds
    assert main(["diff", str(a), str(a)]) == 0
    assert main(["diff", str(a), str(b)]) == 1
    capsys.readouterr()
    tampered = tmp_path / "lease_demo"
    shutil.copytree(a, tampered)
    with open(artifacts.in_folder(tampered, "evaluation/cutoff_metrics.json"), "a", encoding="utf-8") as handle:
        handle.write(" ")
    assert main(["diff", str(a), str(tampered)]) == 2
    captured = capsys.readouterr()
    assert "NOT verified" in captured.out
    assert f"{tampered} did not verify against its manifest" in captured.err
    assert main(["diff", str(tmp_path / "missing"), str(a)]) == 2
    assert "oddsmith diff: cannot compare" in capsys.readouterr().err


def _listing(folder: Path) -> dict:
    return {p.relative_to(folder).as_posix(): (sha256_file(p), p.stat().st_mtime_ns)
            for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.mark.e2e
def test_release_is_frozen_verified_and_never_overwritten(two_builds, tmp_path, monkeypatch, capsys):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    a, b = two_builds
    releases = tmp_path / "releases"
    target, message = release(a, releases_dir=releases)
    assert target == releases / "lease_demo" / "1.0.0" and message.startswith("released lease_demo 1.0.0 to ")
    assert verify_results(target) == []
    manifest = json.loads((target / "manifest.json").read_text())
    assert manifest["release"] == {"version": "1.0.0", "released_at": "2026-01-01",
                                   "from_manifest_sha256": sha256_file(a / "manifest.json")}
    for path in [target, *target.rglob("*")]:
        assert stat.S_IMODE(path.lstat().st_mode) & 0o222 == 0, path
    if (a / "card").is_dir():
        assert (target / "card" / "card.sha256").read_text() != (a / "card" / "card.sha256").read_text()
    assert not [p for p in target.parent.iterdir() if p.name != "1.0.0"], "no staging folder left behind"
    before = _listing(target)

    assert main(["release", str(a), "--releases-dir", str(releases)]) == 0
    assert "already released" in capsys.readouterr().out and _listing(target) == before

    with pytest.raises(ReleaseError, match=r"already exists .* with different content .* never overwritten"):
        release(b, releases_dir=releases)
    assert main(["release", str(b), "--releases-dir", str(releases)]) == 1
    assert "never overwritten" in capsys.readouterr().err
    assert _listing(target) == before

    same = compare_folders(target, a)
    assert same["config"] == [] and same["metrics"] == {"threshold_free": [], "at_cutoff": []}
    assert same["release"]["a"]["version"] == "1.0.0" and same["release"]["b"] is None


@pytest.mark.e2e
def test_an_unverified_folder_is_not_released(two_builds, tmp_path):
    a, _ = two_builds
    copy = tmp_path / "lease_demo"
    shutil.copytree(a, copy)
    with open(copy / "comparison" / "selected.json", "a", encoding="utf-8") as handle:
        handle.write(" ")
    with pytest.raises(ReleaseError, match=r"does not verify[\s\S]*changed: comparison/selected.json"):
        release(copy, releases_dir=tmp_path / "releases")
    assert not (tmp_path / "releases").exists()
