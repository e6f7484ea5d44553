"""Freeze a verified results folder as a numbered release: ``releases/<run>/<version>/``.

The working folder ``results/<run>/`` is rebuilt freely during development; a release is a
read-only copy of one verified state under the version named in the configuration
(``card.version``). Its manifest records the release (version, date and the SHA-256 of the
working manifest it was made from) and its card is re-rendered as a release. A version is
never overwritten: releasing the same content again does nothing, different content under an
existing version is refused.
"""

from __future__ import annotations

import datetime as dt
import os
import shutil
import stat
import tempfile
from pathlib import Path

from oddsmith.errors import OddsmithError
from oddsmith.evidence.manifest import CARD_DIR, MANIFEST_NAME, unsafe_path_reason
from oddsmith.evidence.verify import verify_results
from oddsmith.io import read_json, sha256_file, write_json


class ReleaseError(OddsmithError):
    """A release cannot be made (unverified folder, existing version, bad version name)."""


def release_date(date: str | None = None) -> str:
    """The release's date (ISO): ``date`` if given, else from SOURCE_DATE_EPOCH, else today (UTC)."""
    if date:
        try:
            return dt.date.fromisoformat(date).isoformat()
        except ValueError:
            raise ReleaseError(f"release date must be YYYY-MM-DD, got {date!r}") from None
    epoch = os.environ.get("SOURCE_DATE_EPOCH", "").strip()
    moment = dt.datetime.fromtimestamp(int(epoch), dt.timezone.utc) if epoch.isdigit() else dt.datetime.now(dt.timezone.utc)
    return moment.date().isoformat()


def release(run_dir, *, releases_dir="releases", date: str | None = None) -> tuple[Path, str]:
    """Freeze ``run_dir`` under ``releases_dir/<run>/<version>/``; return the folder and a message.

    Raises
    ------
    ReleaseError
        The folder does not verify, its config names no usable ``card.version``, or the
        version already exists with different content.
    """
    run_dir = Path(run_dir)
    problems = verify_results(run_dir)
    if problems:
        raise ReleaseError(f"{run_dir} does not verify; only a verified folder can be released", problems)
    manifest = read_json(run_dir / MANIFEST_NAME)
    if manifest.get("release"):
        raise ReleaseError(f"{run_dir} is already a release ({manifest['release'].get('version')}); "
                           "release from the working results folder")
    run, version = manifest["run"], str((manifest["config"].get("card") or {}).get("version") or "")
    if not version or unsafe_path_reason(version) or "/" in version:
        raise ReleaseError(f"card.version in the config must be a plain version name such as 1.0.0, got {version!r}")
    source_sha = sha256_file(run_dir / MANIFEST_NAME)
    target = Path(releases_dir) / run / version
    if target.exists() or target.is_symlink():
        return target, _existing(target, run, version, source_sha)
    target.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{version}.", suffix=".staging", dir=target.parent))
    try:
        _fill(staging, run_dir, manifest, {"version": version, "released_at": release_date(date),
                                           "from_manifest_sha256": source_sha})
        _freeze(staging)
        try:
            os.rename(staging, target)
        except OSError:
            raise ReleaseError(f"{target} appeared while releasing; nothing was overwritten") from None
    finally:
        if staging.exists():
            _thaw(staging)
            shutil.rmtree(staging)
    return target, f"released {run} {version} to {target} (from manifest {source_sha[:12]})"


def _existing(target: Path, run: str, version: str, source_sha: str) -> str:
    """No-op message when ``target`` holds this very content; otherwise refuse."""
    try:
        recorded = (read_json(target / MANIFEST_NAME).get("release") or {}).get("from_manifest_sha256")
    except OddsmithError:
        recorded = None
    if recorded == source_sha and not verify_results(target):
        return f"{run} {version} is already released at {target} with identical content; nothing to do"
    raise ReleaseError(
        f"release {run} {version} already exists at {target} with different content "
        f"(released from manifest {str(recorded)[:12]}, this folder's manifest is {source_sha[:12]}); "
        "a release is never overwritten: raise card.version in the config and rebuild")


def _fill(staging: Path, run_dir: Path, manifest: dict, record: dict) -> None:
    """Copy every artifact, write the release manifest, render the release card, verify."""
    for rel in sorted(manifest["files"]):
        (staging / rel).parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(run_dir / rel, staging / rel)
        if sha256_file(staging / rel) != manifest["files"][rel]["sha256"]:
            raise ReleaseError(f"{rel} changed while it was being copied; release abandoned")
    write_json(staging / MANIFEST_NAME, manifest | {"release": record})
    render = _card_renderer() if (run_dir / CARD_DIR).is_dir() else None
    if render is not None:
        render(staging, out_dir=staging / CARD_DIR, release={"version": record["version"],
                                                             "released_at": record["released_at"]})
    problems = verify_results(staging)
    if problems:
        raise ReleaseError("the release copy does not verify; nothing was released", problems)


def _card_renderer():
    try:
        from oddsmith.reporting.card import render_card
    except ImportError:
        return None
    return render_card


def _freeze(folder: Path) -> None:
    """Make every file and folder read-only (files 0444, folders 0555)."""
    for dirpath, dirnames, filenames in os.walk(folder, topdown=False):
        for name in filenames:
            os.chmod(Path(dirpath) / name, stat.S_IRUSR | stat.S_IRGRP | stat.S_IROTH)
        os.chmod(dirpath, stat.S_IRUSR | stat.S_IXUSR | stat.S_IRGRP | stat.S_IXGRP | stat.S_IROTH | stat.S_IXOTH)


def _thaw(folder: Path) -> None:
    for dirpath, _, _ in os.walk(folder):
        os.chmod(dirpath, stat.S_IRWXU)


# ---- command line ----

def register(sub) -> None:
    """Add ``oddsmith release`` to the command line."""
    p = sub.add_parser("release", help="freeze a verified results folder as releases/<run>/<version>/ (read-only)")
    p.add_argument("results", help="the working results folder, e.g. results/lease_demo")
    p.add_argument("--releases-dir", default="releases", help="where releases live (default: %(default)s)")
    p.add_argument("--date", help="release date YYYY-MM-DD (default: from SOURCE_DATE_EPOCH, else today)")
    p.set_defaults(func=_cmd_release)


def _cmd_release(args) -> int:
    target, message = release(args.results, releases_dir=args.releases_dir, date=args.date)
    print(message)
    git = read_json(target / MANIFEST_NAME).get("git")
    if git is None or git.get("dirty"):
        print("note: the release was built from code that was not committed"
              + (" (uncommitted changes in the work tree)" if git else " (no git repository)") + "; its card says so")
    if not (target / CARD_DIR).is_dir():
        print(f"note: {target} has no card (the results folder had none, or this oddsmith cannot render one)")
    return 0
