"""Publication of a staging build (``work/<run>`` → ``results/<run>``) on small hand-made
folders, and the ``oddsmith build`` command's check of the configuration before Snakemake runs.

The end-to-end cases (a broken data file, a broken config and a killed build after a good
build) are in ``test_rebuild.py``."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from oddsmith.cli import main
from oddsmith.evidence.publish import PublishError, describe_current, folders, pending, publish, recover
from oddsmith.evidence.verify import verify_results
from oddsmith.io import sha256_file

from conftest import ROOT, copy_project, small_build, write_card

RUN = "demo"


def _listing(folder: Path) -> dict:
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def _clear(staged: Path) -> None:
    """What Snakemake does before a job runs: delete its outputs (never write into them)."""
    for path in staged.rglob("*"):
        if path.is_file():
            path.unlink()


def test_a_verified_build_is_published_by_hard_links(tmp_path):
    staged = small_build(tmp_path)
    message = publish(RUN, project_dir=tmp_path)
    published = tmp_path / "results" / RUN
    assert message == f"results/{RUN} now holds this build (card fingerprint {sha256_file(staged / 'manifest.json')})"
    assert verify_results(published) == []
    assert _listing(published) == _listing(staged)
    assert os.path.samefile(published / "candidates/a/model.json", staged / "candidates/a/model.json")
    assert sorted(p.name for p in (tmp_path / "results").iterdir()) == [RUN], "no incoming or previous folder left"


def test_only_what_the_manifest_and_card_list_is_published(tmp_path):
    staged = small_build(tmp_path)
    (staged / "candidates" / "old").mkdir()  # an empty folder left in the staging folder
    (staged / "card" / ".model_card.pdf.x.part").write_bytes(b"half")
    publish(RUN, project_dir=tmp_path)
    published = tmp_path / "results" / RUN
    assert not (published / "candidates" / "old").exists() and not (published / "card" / ".model_card.pdf.x.part").exists()
    assert verify_results(published) == []


def test_a_new_build_replaces_the_old_and_the_old_files_keep_their_bytes(tmp_path):
    """A later build writes new files (temporary file + rename; Snakemake deletes a job's
    outputs first), so the files published before, hard links of the old staging files, keep
    their bytes until the swap replaces them."""
    small_build(tmp_path, model=b'{"b": 1}\n')
    publish(RUN, project_dir=tmp_path)
    published = tmp_path / "results" / RUN
    before = _listing(published)
    old_model = published / "candidates/a/model.json"
    keep = tmp_path / "old-model.json"
    os.link(old_model, keep)
    _clear(tmp_path / "work" / RUN)
    staged = small_build(tmp_path, model=b'{"b": 2}\n', card="second")
    assert _listing(published) == before, "rebuilding the staging folder changed the published result"
    message = publish(RUN, project_dir=tmp_path)
    assert message.endswith(f"(card fingerprint {sha256_file(staged / 'manifest.json')})")
    assert (published / "candidates/a/model.json").read_bytes() == b'{"b": 2}\n'
    assert keep.read_bytes() == b'{"b": 1}\n'
    assert verify_results(published) == []


@pytest.mark.parametrize("damage,fragment", [
    (lambda staged: (staged / "card" / "card.sha256").unlink(), "holds no complete result (card/card.sha256 not built)"),
    (lambda staged: (staged / "manifest.json").unlink(), "holds no complete result (manifest.json not built)"),
    (lambda staged: (staged / "validated" / "data.txt").write_bytes(b"other\n"), "changed: validated/data.txt"),
    (lambda staged: (staged / "candidates" / "a" / "cv.json").unlink(), "missing: candidates/a/cv.json"),
])
def test_an_incomplete_or_unverified_build_is_not_published(tmp_path, damage, fragment):
    small_build(tmp_path, card="first")
    publish(RUN, project_dir=tmp_path)
    published = tmp_path / "results" / RUN
    before = _listing(published)
    _clear(tmp_path / "work" / RUN)
    staged = small_build(tmp_path, model=b'{"b": 3}\n', card="second")
    damage(staged)
    with pytest.raises(PublishError, match="not built|does not verify") as err:
        publish(RUN, project_dir=tmp_path)
    assert fragment in str(err.value)
    assert f"results/{RUN} still holds the build of " in str(err.value) and "it verifies" in str(err.value)
    assert _listing(published) == before
    assert sorted(p.name for p in (tmp_path / "results").iterdir()) == [RUN]


def test_an_interrupted_swap_is_undone_or_finished(tmp_path):
    small_build(tmp_path)
    publish(RUN, project_dir=tmp_path)
    where = folders(RUN, project_dir=tmp_path)
    before = _listing(where["published"])
    os.rename(where["published"], where["previous"])  # stopped between the two renames
    where["incoming"].mkdir()
    assert describe_current(RUN, project_dir=tmp_path).startswith(f"results/{RUN} still holds the build of ")
    assert _listing(where["published"]) == before and not where["previous"].exists() and not where["incoming"].exists()
    os.link(where["published"] / "manifest.json", tmp_path / "m")  # stopped after both renames
    where["previous"].mkdir()
    recover(RUN, project_dir=tmp_path)
    assert not where["previous"].exists() and _listing(where["published"]) == before


def test_pending_names_only_a_finished_build_that_was_not_published(tmp_path):
    assert pending(RUN, project_dir=tmp_path) is None  # nothing built
    staged = small_build(tmp_path)
    assert pending(RUN, project_dir=tmp_path) == sha256_file(staged / "card" / "card.sha256")
    publish(RUN, project_dir=tmp_path)
    assert pending(RUN, project_dir=tmp_path) is None
    _clear(staged / "card")
    write_card(staged, "rendered again")
    assert pending(RUN, project_dir=tmp_path) == sha256_file(staged / "card" / "card.sha256")


def test_describe_current_without_a_result(tmp_path):
    assert describe_current(RUN, project_dir=tmp_path) == f"results/{RUN} holds no result yet."


# ---- oddsmith build ----

def test_build_refuses_a_bad_config_before_snakemake_starts(tmp_path, monkeypatch, capsys):
    project = copy_project(tmp_path / "project")
    bad = project / "config" / "bad.yaml"
    bad.write_text((project / "config" / "demo.yaml").read_text() + "\nsurprise: 1\n")
    monkeypatch.chdir(project)
    assert main(["build", "config/bad.yaml"]) == 1
    err = capsys.readouterr().err
    assert err.startswith("oddsmith build: config/bad.yaml is not a usable configuration; nothing was built.")
    assert "'surprise' was unexpected" in err
    assert not (project / ".snakemake").exists() and not (project / "work").exists()
    assert main(["build", "config/missing.yaml"]) == 1
    assert "configuration file not found: config/missing.yaml" in capsys.readouterr().err


def test_build_runs_snakemake_with_the_one_config_and_extra_arguments(tmp_path):
    """A draft from `oddsmith init` is complete on its own: `oddsmith build` checks it and
    hands it to Snakemake (a dry run here)."""
    project = copy_project(tmp_path / "project")
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    bin_dir = Path(sys.executable).parent
    subprocess.run([str(bin_dir / "oddsmith"), "init", "data_demo/lease_applications.csv", "--contract",
                    "schemas/contracts/mine.yaml", "--config", "config/mine.yaml"], cwd=project, env=env, check=True,
                   capture_output=True)
    done = subprocess.run([str(bin_dir / "oddsmith"), "build", "config/mine.yaml", "--cores", "1", "--", "--dry-run",
                           "work/lease_applications/split/summary.json"], cwd=project, env=env, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr[-3000:]
    assert ("oddsmith build: snakemake --cores 1 --dry-run work/lease_applications/split/summary.json "
            "--configfile config/mine.yaml") in done.stderr
    assert "rule split:" in done.stdout and "rule fit:" not in done.stdout and "This was a dry-run" in done.stdout
    assert "lease_demo" not in done.stdout, "the demo's run reached a build of another configuration"


@pytest.mark.parametrize("args,fragment", [
    ([], "no configuration file given"),
    (["--configfile", "config/demo.yaml", "config/other.yaml"], "several configuration files given (config/demo.yaml, config/other.yaml)"),
])
def test_snakemake_without_exactly_one_config_says_how_to_choose(tmp_path, args, fragment):
    project = copy_project(tmp_path / "project")
    (project / "config" / "other.yaml").write_text((project / "config" / "demo.yaml").read_text())
    done = subprocess.run([str(Path(sys.executable).parent / "snakemake"), "--cores", "1", "--dry-run", *args],
                          cwd=project, capture_output=True, text=True)
    assert done.returncode != 0
    assert fragment in done.stderr and "--configfile config/demo.yaml" in done.stderr, done.stderr[-2000:]
    assert not (project / "work").exists()
