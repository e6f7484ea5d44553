"""Publish a finished build: the workflow builds in ``work/<run>/`` and only a complete,
verified result replaces ``results/<run>/``.

A failed, partial or killed build therefore never costs the last good result: Snakemake
deletes a job's old outputs before the job runs, but those outputs live in the staging folder;
``results/<run>/`` changes only here, in three steps:

1. the files the staging manifest lists (artifacts, ``manifest.json``, the card's files named
   in ``card/card.sha256``) are hard-linked into ``results/.<run>.incoming/`` (copied when the
   two folders sit on different devices or the file system has no hard links);
2. that copy is verified (``oddsmith.evidence.verify``) exactly as a user would verify it;
3. it is swapped in with two renames (old → ``results/.<run>.previous``, incoming →
   ``results/<run>``) and the previous folder is removed.

A swap interrupted between its two renames is finished or undone the next time this module
looks at the run (:func:`recover`). Hard links are safe because no oddsmith writer changes a
file in place: every artifact is written to a temporary file and renamed, and Snakemake
deletes a job's outputs before the job runs, so a later build always makes new files.
"""

from __future__ import annotations

import datetime as dt
import os
import shutil
from pathlib import Path

from oddsmith import artifacts
from oddsmith.errors import OddsmithError
from oddsmith.evidence.manifest import MANIFEST_NAME, RESULTS_DIR, STAGING_DIR, unsafe_path_reason
from oddsmith.evidence.verify import CARD_HASHES, check_results
from oddsmith.io import read_json, sha256_file


def folders(run: str, *, project_dir: str | Path = ".") -> dict[str, Path]:
    """The staging, published, incoming and previous folders of ``run``."""
    project_dir = Path(project_dir)
    results = project_dir / RESULTS_DIR
    return {"staging": project_dir / STAGING_DIR / run, "published": results / run,
            "incoming": results / f".{run}.incoming", "previous": results / f".{run}.previous"}


def recover(run: str, *, project_dir: str | Path = ".") -> None:
    """Finish or undo a swap that was interrupted, and drop a half-made incoming copy.

    With both ``results/<run>`` and the previous folder present the swap had finished; with
    only the previous folder it stopped between the renames, and the previous result (the
    last one published) is put back.
    """
    where = folders(run, project_dir=project_dir)
    if where["previous"].is_dir():
        if where["published"].exists():
            shutil.rmtree(where["previous"])
        else:
            os.rename(where["previous"], where["published"])
    if where["incoming"].exists():
        shutil.rmtree(where["incoming"])


def staged_files(staging: Path) -> list[str] | str:
    """The files a publication copies, or the reason the staging folder holds no complete result."""
    missing = [name for name in (MANIFEST_NAME, CARD_HASHES) if not (staging / name).is_file()]
    if missing:
        return f"{staging} holds no complete result ({' and '.join(missing)} not built)"
    try:
        manifest = read_json(staging / MANIFEST_NAME)
    except OddsmithError as exc:  # a damaged manifest: say so, publish nothing
        return f"{staging / MANIFEST_NAME} cannot be read: {exc}"
    listed = [line.split("  ", 1)[1] for line in (staging / CARD_HASHES).read_text(encoding="utf-8").splitlines()
              if "  " in line]
    return sorted(set(manifest.get("files", {})) | set(listed) | {MANIFEST_NAME, CARD_HASHES})


def _link_or_copy(source: Path, target: Path) -> None:
    target.parent.mkdir(parents=True, exist_ok=True)
    try:
        os.link(source, target)
    except OSError:  # another device, or no hard links on this file system
        shutil.copy2(source, target)


class PublishError(OddsmithError):
    """A staging folder is incomplete or does not verify, so it was not published."""


def publish(run: str, *, project_dir: str | Path = ".") -> str:
    """Publish ``work/<run>`` as ``results/<run>`` when it is complete and verifies.

    Returns the message for the terminal (the fingerprint now published, or that the
    published folder already holds this build).

    Raises
    ------
    PublishError
        The staging folder lacks the manifest or the card, names files outside itself, or
        its copy does not verify; ``results/<run>`` is left as it was.
    """
    where = folders(run, project_dir=project_dir)
    recover(run, project_dir=project_dir)
    names = staged_files(where["staging"])
    if isinstance(names, str):
        raise PublishError(f"{names}; {describe_current(run, project_dir=project_dir)}")
    unsafe = [n for n in names if unsafe_path_reason(n)]
    if unsafe:
        raise PublishError(f"{where['staging']} names files outside itself; not published", unsafe)
    missing = [name for name in names if not (where["staging"] / name).is_file()]
    if missing:
        raise PublishError(f"{STAGING_DIR}/{run} does not verify, so it was not published; "
                           + describe_current(run, project_dir=project_dir),
                           [f"missing: {name} (listed in its manifest or card/card.sha256)" for name in missing])
    try:
        for name in names:
            _link_or_copy(where["staging"] / name, where["incoming"] / name)
    except OSError as exc:
        shutil.rmtree(where["incoming"], ignore_errors=True)
        raise PublishError(f"could not copy {where['staging']} into {where['incoming']}: {exc}") from None
    report = check_results(where["incoming"])
    if report.problems:
        shutil.rmtree(where["incoming"])
        raise PublishError(f"{STAGING_DIR}/{run} does not verify, so it was not published; "
                           + describe_current(run, project_dir=project_dir), report.problems)
    before = where["published"] / MANIFEST_NAME
    unchanged = before.is_file() and sha256_file(before) == report.manifest_sha256
    _swap(where)  # even when unchanged: the fresh, verified copy replaces one that may have been touched
    return (f"{RESULTS_DIR}/{run} now holds this build (card fingerprint {report.manifest_sha256}"
            + ("; the same result as before)" if unchanged else ")"))


def pending(run: str, *, project_dir: str | Path = ".") -> str | None:
    """The card hashes of a finished staging build that is not the published one, else None.

    Used as a parameter of the publish rule: it is None in every ordinary state (nothing
    built yet, or the last build published), so it changes, and reruns the publication,
    only when a finished build was never published (its publication was interrupted, or
    ``results/<run>`` was removed).
    """
    where = folders(run, project_dir=project_dir)
    staged, published = where["staging"] / CARD_HASHES, where["published"] / CARD_HASHES
    if not staged.is_file():
        return None
    if published.is_file() and published.read_bytes() == staged.read_bytes():
        return None
    return sha256_file(staged)


def after_build(run: str, *, since: float, project_dir: str | Path = ".") -> str:
    """What ``results/<run>`` holds after a successful Snakemake invocation that started at ``since``."""
    where = folders(run, project_dir=project_dir)
    marker = marker_path(run, project_dir=project_dir)
    if marker.is_file() and marker.stat().st_mtime >= since and (where["published"] / MANIFEST_NAME).is_file():
        return marker.read_text(encoding="utf-8").strip()
    message = describe_current(run, project_dir=project_dir)
    if pending(run, project_dir=project_dir):
        message += (f" {STAGING_DIR}/{run} holds a newer finished build; the default target "
                    "(or the publish rule) publishes it once it verifies.")
    return message


def marker_path(run: str, *, project_dir: str | Path = ".") -> Path:
    """The publish rule's output: a small record beside the staging folder of what it published."""
    return Path(project_dir) / STAGING_DIR / artifacts.PUBLISHED_MARKER.format(run=run)


def _swap(where: dict) -> None:
    if where["published"].exists():
        os.rename(where["published"], where["previous"])
    os.rename(where["incoming"], where["published"])
    if where["previous"].exists():
        shutil.rmtree(where["previous"])


def describe_current(run: str, *, project_dir: str | Path = ".") -> str:
    """One line saying which result ``results/<run>`` holds and whether it verifies."""
    where = folders(run, project_dir=project_dir)
    recover(run, project_dir=project_dir)
    published, name = where["published"], f"{RESULTS_DIR}/{run}"
    if not (published / MANIFEST_NAME).is_file():
        return f"{name} holds no result yet." if not published.exists() else f"{name} holds no manifest."
    built = dt.datetime.fromtimestamp((published / MANIFEST_NAME).stat().st_mtime).strftime("%Y-%m-%d %H:%M")
    report = check_results(published)
    state = "it verifies" if not report.problems else f"it does NOT verify ({len(report.problems)} problem(s); run oddsmith verify {name})"
    return f"{name} still holds the build of {built} (card fingerprint {report.manifest_sha256}); {state}."


def current_result_note(config) -> str:
    """:func:`describe_current` for the run a (possibly invalid) configuration names, or ''."""
    run = config.get("run") if isinstance(config, dict) else None
    if not isinstance(run, str) or unsafe_path_reason(run) or "/" in run:
        return ""
    return describe_current(run)
