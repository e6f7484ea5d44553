"""``oddsmith verify``: a clean folder verifies; every kind of damage is named — a flipped
byte in each kind of artifact, missing and extra files, broken provenance links, a card bound
to another manifest, a truncated, non-JSON, hand-edited or newer-format manifest, paths that
leave the folder (refused unread) and symlinks. Nothing in the checked folder is run."""

from __future__ import annotations

import json
import os
import re
import shlex
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

import oddsmith.evidence.verify as verify_module
from oddsmith.evidence.manifest import build_manifest
from oddsmith.evidence.verify import check_results, verify_results
from oddsmith.io import sha256_bytes, sha256_file, write_json

from conftest import run_snakemake, small_build, write_card

BIN = Path(sys.executable).parent
RUN = "demo"


# ---- a small hand-made results folder ----

@pytest.fixture()
def small_run(tmp_path) -> Path:
    """results/demo with two jobs, a manifest and a card, built and published like the real thing
    (the stamps name the staging folder work/demo)."""
    project = tmp_path / "project"
    staged = small_build(project, RUN)
    run_dir = project / "results" / RUN
    shutil.copytree(staged, run_dir)
    return run_dir


def _write_card(run_dir: Path) -> None:
    write_card(run_dir)


def _manifest(run_dir: Path) -> dict:
    return json.loads((run_dir / "manifest.json").read_text())


def _rewrite(run_dir: Path, manifest: dict, *, rebind_card: bool = True) -> None:
    write_json(run_dir / "manifest.json", manifest)
    if rebind_card:
        _write_card(run_dir)


def _text(problems: list[str]) -> str:
    return "\n".join(problems)


def test_a_clean_folder_verifies(small_run):
    report = check_results(small_run)
    assert report.problems == []
    assert report.n_files == 5 and report.n_stamps == 2 and report.card.startswith("bound")


def test_missing_extra_and_changed_files_are_named_with_hashes(small_run):
    (small_run / "candidates" / "a" / "cv.json").unlink()
    (small_run / "candidates" / "b").mkdir()
    (small_run / "candidates" / "b" / "model.json").write_text("{}")
    model = small_run / "candidates" / "a" / "model.json"
    expected = sha256_file(model)
    model.write_bytes(b'{"b": 2}\n')
    text = _text(verify_results(small_run))
    cv, empty, found = sha256_bytes(b"{}\n"), sha256_bytes(b"{}"), sha256_bytes(b'{"b": 2}\n')
    assert f"missing: candidates/a/cv.json (expected sha256 {cv})" in text
    assert f"extra file not in the manifest: candidates/b/model.json (sha256 {empty})" in text
    assert f"changed: candidates/a/model.json expected sha256 {expected}, found {found}" in text


def test_a_stamp_output_hash_that_differs_from_the_manifest_is_a_broken_link(small_run):
    """Someone replaces a file and patches the manifest to match: the stamp still disagrees."""
    model = small_run / "candidates" / "a" / "model.json"
    model.write_bytes(b'{"b": 99}\n')
    manifest = _manifest(small_run)
    manifest["files"]["candidates/a/model.json"] |= {"sha256": sha256_file(model), "size": model.stat().st_size}
    _rewrite(small_run, manifest)
    problems = verify_results(small_run)
    assert len(problems) == 1, problems
    assert problems[0].startswith("broken link: stamp provenance/fit-a.json records candidates/a/model.json as sha256")


def test_an_input_hash_that_differs_from_the_upstream_file_is_a_broken_link(small_run):
    """The upstream output and its stamp are replaced consistently; the downstream stamp still
    records the hash of the file it really read."""
    data = small_run / "validated" / "data.txt"
    data.write_bytes(b"other rows\n")
    stamp_path = small_run / "provenance" / "validate.json"
    stamp = json.loads(stamp_path.read_text())
    stamp["outputs"][f"work/{RUN}/validated/data.txt"] = sha256_file(data)
    write_json(stamp_path, stamp)
    manifest = _manifest(small_run)
    for rel in ("validated/data.txt", "provenance/validate.json"):
        full = small_run / rel
        manifest["files"][rel] |= {"sha256": sha256_file(full), "size": full.stat().st_size}
    _rewrite(small_run, manifest)
    problems = verify_results(small_run)
    typed = sha256_bytes(b"typed\n")
    assert problems == [f"broken link: stamp provenance/fit-a.json read validated/data.txt with sha256 "
                        f"{typed}, but the file produced upstream has sha256 {sha256_file(data)}"]


def test_a_raw_input_hash_that_differs_from_the_stamp_is_a_broken_link(small_run):
    manifest = _manifest(small_run)
    manifest["raw_inputs"]["data/raw.csv"]["sha256"] = "0" * 64
    _rewrite(small_run, manifest)
    assert any("read data/raw.csv with sha256" in p and "records the raw input as 000" in p for p in verify_results(small_run))


@pytest.mark.parametrize("damage,fragment", [
    (lambda raw: raw[: len(raw) // 2], "manifest.json is not valid JSON (truncated or edited?)"),
    (lambda raw: b"\x00\xff not json", "manifest.json is not valid JSON"),
    (lambda raw: b"[1, 2, 3]\n", "manifest.json must hold a JSON object, found list"),
    (lambda raw: raw.replace(b'"run": "demo"', b'"run": "demo",\n  "run": "other"'), "duplicate key(s) ['run']"),
    (lambda raw: raw.replace(b"oddsmith-manifest/1", b"oddsmith-manifest/2"),
     "format oddsmith-manifest/2, newer than this oddsmith reads (oddsmith-manifest/1)"),
    (lambda raw: raw.replace(b"oddsmith-manifest/1", b"another-tool/1"), "is not an oddsmith manifest"),
    (lambda raw: raw.replace(b'"source_date_epoch": 0', b'"source_date_epoch": NaN'), "non-standard constant NaN"),
])
def test_damaged_manifests_are_refused_with_the_reason(small_run, damage, fragment):
    path = small_run / "manifest.json"
    path.write_bytes(damage(path.read_bytes()))
    problems = verify_results(small_run)
    assert len(problems) == 1 and fragment in problems[0], problems


def test_a_hand_edited_manifest_is_named(small_run):
    manifest = _manifest(small_run)
    manifest["files"]["candidates/a/cv.json"]["sha256"] = "f" * 64
    (small_run / "manifest.json").write_text(json.dumps(manifest, indent=4))
    text = _text(verify_results(small_run))
    assert "not in the canonical form oddsmith writes (edited by hand?)" in text
    assert "changed: candidates/a/cv.json expected sha256 ffff" in text
    assert "card/card.sha256 was rendered from a different manifest" in text


def test_paths_leaving_the_folder_are_refused_and_never_read(small_run, monkeypatch):
    outside = small_run.parent.parent / "secret.txt"
    outside.write_text("do not read\n")
    manifest = _manifest(small_run)
    template = manifest["files"]["candidates/a/cv.json"]
    manifest["files"]["../../secret.txt"] = dict(template)
    manifest["files"]["/etc/hostname"] = dict(template)
    _rewrite(small_run, manifest)
    card_hashes = small_run / "card" / "card.sha256"
    card_hashes.write_text(card_hashes.read_text() + f"{'0' * 64}  ../../secret.txt\n")
    opened = []
    real = verify_module.sha256_file
    monkeypatch.setattr(verify_module, "sha256_file", lambda p, **kw: opened.append(Path(p).resolve()) or real(p, **kw))
    text = _text(verify_results(small_run))
    assert "refused path '../../secret.txt' in manifest (not read): it contains .." in text
    assert "refused path '/etc/hostname' in manifest (not read): it is absolute" in text
    assert "card/card.sha256 line 4 names a path outside the card: '../../secret.txt' (refused, not read)" in text
    assert opened and all(small_run.resolve() in p.parents for p in opened)


def test_symlinks_are_reported_not_followed(small_run):
    target = small_run.parent.parent / "elsewhere.json"
    target.write_text("{}")
    (small_run / "candidates" / "linked.json").symlink_to(target)
    (small_run / "card" / "extra.pdf").symlink_to(target)
    text = _text(verify_results(small_run))
    assert f"candidates/linked.json is a symlink (to {target})" in text
    assert f"card/extra.pdf is a symlink (to {target})" in text


def test_card_bound_to_another_manifest_or_altered_is_named(small_run):
    hashes = small_run / "card" / "card.sha256"
    hashes.write_text(hashes.read_text().replace(sha256_file(small_run / "manifest.json"), "a" * 64))
    (small_run / "card" / "model_card.pdf").write_bytes(b"%PDF-1.7 other\n")
    (small_run / "card" / "notes.txt").write_text("hi")
    text = _text(verify_results(small_run))
    assert f"card.sha256 was rendered from a different manifest: it records sha256 {'a' * 64}" in text
    assert "changed: card/model_card.pdf expected sha256" in text and "(from card/card.sha256)" in text
    assert "extra file in card/ not listed in card/card.sha256: card/notes.txt" in text


def _follow_the_advice(problems: list[str]) -> None:
    """Run the removal each problem suggests (``delete it (rm ... PATH)``)."""
    for problem in problems:
        command = shlex.split(re.search(r"delete it \((rm(?: -r)? .+?)\) or publish", problem).group(1))
        subprocess.run(command, check=True)


@pytest.mark.parametrize("rel", [
    "figures/.payload.bin.part",  # the name of an interrupted write, in a folder the manifest does not know
    "candidates/a/.model.json.k2j3.part",  # the same, next to a listed file
    "card/.model_card.pdf.x1y2.part",
    ".hidden",
    "validated/.notes.txt",
])
def test_every_unlisted_file_is_an_error_whatever_its_name(small_run, rel):
    path = small_run / rel
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(b"half-written bytes")
    report = check_results(small_run)
    assert report.notes == []
    assert any(rel in p and p.startswith("extra file") for p in report.problems), report.problems
    assert all("delete it (rm" in p for p in report.problems), report.problems
    _follow_the_advice(report.problems)
    assert verify_results(small_run) == []


@pytest.mark.parametrize("rel,fragment", [
    ("candidates/old", "extra folder not in the manifest: candidates/old/ (empty)"),
    ("spare/inner", "extra folder not in the manifest: spare/ (no listed file under it)"),
    ("card/draft", "extra folder in card/: card/draft/ (empty)"),
])
def test_empty_folders_are_errors(small_run, rel, fragment):
    (small_run / rel).mkdir(parents=True)
    problems = verify_results(small_run)
    assert len(problems) == 1 and problems[0].startswith(fragment), problems
    _follow_the_advice(problems)
    assert verify_results(small_run) == []


def test_a_second_name_for_a_listed_file_is_an_error(small_run):
    """A hard link to a listed file, and a copy of its bytes under another name: both extra."""
    listed = small_run / "candidates" / "a" / "model.json"
    os.link(listed, small_run / "candidates" / "a" / "model-link.json")
    (small_run / "candidates" / "a" / "cv.json.bak").write_bytes((small_run / "candidates" / "a" / "cv.json").read_bytes())
    text = _text(verify_results(small_run))
    assert f"extra file not in the manifest: candidates/a/model-link.json (sha256 {sha256_file(listed)})" in text
    assert "extra file not in the manifest: candidates/a/cv.json.bak (sha256 " in text


def test_a_listed_file_linked_from_outside_the_folder_still_verifies(small_run):
    """Published files are hard links of the staging folder's: a link count above one is normal."""
    os.link(small_run / "candidates" / "a" / "model.json", small_run.parent / "model-elsewhere.json")
    assert verify_results(small_run) == []


def test_verify_never_runs_code_from_the_checked_folder(small_run):
    marker = small_run.parent.parent / "ran.txt"
    payload = f"open({str(marker)!r}, 'w').write('ran')\n"
    for rel in ("sitecustomize.py", "usercustomize.py", "oddsmith/__init__.py", "oddsmith/evidence/verify.py", "conftest.py"):
        (small_run / rel).parent.mkdir(exist_ok=True)
        (small_run / rel).write_text(payload)
    result = subprocess.run([str(BIN / "oddsmith"), "verify", "."], cwd=small_run, capture_output=True, text=True)
    assert result.returncode == 1 and "extra file not in the manifest: sitecustomize.py" in result.stdout
    assert not marker.exists()


def test_cli_exit_codes_and_summary(small_run, capsys):
    from oddsmith.cli import main

    assert main(["verify", str(small_run)]) == 0
    assert capsys.readouterr().out.strip().splitlines() == [
        f"verified {small_run}: 5 files and 2 provenance stamps match manifest.json "
        f"(sha256 {sha256_file(small_run / 'manifest.json')[:16]}…); card bound to this manifest (2 files)"]
    (small_run / "validated" / "data.txt").write_text("x")
    assert main(["verify", str(small_run)]) == 1
    out = capsys.readouterr().out
    assert out.startswith(f"NOT verified: {small_run} — ") and "  - changed: validated/data.txt" in out


# ---- a flipped byte in each kind of artifact of the real demo build ----

def _targets(project: Path) -> list[str]:
    rules = run_snakemake(project, "--list-rules").stdout.split()
    return ["all", "work/lease_demo/manifest.json"] + (["work/lease_demo/card/card.sha256"] if "card" in rules else [])


@pytest.fixture(scope="module")
def demo_copy(demo_build, tmp_path_factory) -> Path:
    run_snakemake(demo_build, *_targets(demo_build))
    copy = tmp_path_factory.mktemp("tamper") / "lease_demo"
    shutil.copytree(demo_build / "results" / "lease_demo", copy)
    return copy


KINDS = [
    ("validated/data.parquet", "changed: validated/data.parquet"),
    ("validated/summary.txt", "changed: validated/summary.txt"),
    ("validated/contract.yaml", "changed: validated/contract.yaml"),
    ("candidates/lasso/model.json", "changed: candidates/lasso/model.json"),
    ("candidates/ridge/oof.parquet", "changed: candidates/ridge/oof.parquet"),
    ("threshold/choice.json", "changed: threshold/choice.json"),
    ("provenance/fit-lasso.json", "changed: provenance/fit-lasso.json"),
    ("figures/roc.svg", "changed: figures/roc.svg"),
    ("card/model_card.html", "changed: card/model_card.html"),
    ("card/model_card.pdf", "changed: card/model_card.pdf"),
    ("card/card.sha256", "card/card.sha256"),
    ("manifest.json", "manifest"),
]


@pytest.mark.e2e
def test_a_flipped_byte_in_each_kind_of_artifact_is_named(demo_copy):
    assert verify_results(demo_copy) == []
    tested = 0
    for rel, fragment in KINDS:
        path = demo_copy / rel
        if not path.exists() and rel.split("/")[0] in ("card", "figures"):
            continue  # a workflow without the card stage
        original = path.read_bytes()
        flipped = bytearray(original)
        flipped[len(flipped) // 2] ^= 0x01
        path.write_bytes(bytes(flipped))
        try:
            problems = verify_results(demo_copy)
            assert problems and any(fragment in p for p in problems), (rel, problems)
        finally:
            path.write_bytes(original)
        tested += 1
    assert tested >= 8
    assert verify_results(demo_copy) == []
