"""SHA-256 of files, remembered per file state so that a large file is read once per change.

A hash is remembered under the file's path together with its state: size, modification
time (ns), status-change time (ns), inode and device. The same state means the same bytes,
short of writing the file and then forging both times (``touch -d`` sets the modification
time, never the status-change time), so a remembered hash is used only while every part of
the state matches; any write, rename over it or ``touch`` makes the file be read again once.

The remembered hashes live in one JSON file of the project (:data:`CACHE_PATH`). Jobs that
run at once may each rewrite it; a lost entry only costs one more read of that file, never
a wrong hash, because every entry carries the state it is valid for.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

from oddsmith.io import sha256_file, write_bytes_atomic

#: The remembered hashes (relative to the project folder; Snakemake's own bookkeeping folder).
CACHE_PATH = Path(".snakemake") / "oddsmith-sha256.json"


def file_state(path: str | Path) -> list[int]:
    """``[size, mtime_ns, ctime_ns, inode, device]`` of ``path`` (links followed)."""
    info = os.stat(path)
    return [info.st_size, info.st_mtime_ns, info.st_ctime_ns, info.st_ino, info.st_dev]


def sha256_remembered(paths, *, cache: str | Path | None) -> dict[str, str]:
    """SHA-256 of each file in ``paths``, read only when its state differs from the remembered one.

    Returns ``{path: hex digest}`` (paths as given, in the order given). Newly read hashes
    are remembered in ``cache`` (entries of files that are gone or changed are dropped at the
    same time); with ``cache=None`` every file is read and nothing is written.

    Examples
    --------
    >>> import tempfile
    >>> folder = Path(tempfile.mkdtemp())
    >>> _ = (folder / "a.txt").write_bytes(b"abc")
    >>> sha256_remembered([folder / "a.txt"], cache=folder / "cache.json")[str(folder / "a.txt")][:12]
    'ba7816bf8f01'
    """
    if cache is None:
        return {str(p): sha256_file(p) for p in paths}
    known = _load(cache)
    found, new = {}, {}
    for path in map(str, paths):
        key, state = os.path.abspath(path), file_state(path)
        entry = known.get(key)
        if isinstance(entry, dict) and entry.get("state") == state:
            found[path] = entry["sha256"]
            continue
        digest = sha256_file(path)
        if file_state(path) == state:  # not written while it was read
            new[key] = {"state": state, "sha256": digest}
        found[path] = digest
    if new:
        _store(cache, known | new)
    return found


def remember(digests: dict[str, str], *, cache: str | Path | None) -> None:
    """Remember hashes the caller has just computed (a job's own finished outputs) under the
    files' current state; nothing with ``cache=None``.

    Call it right after hashing: a file written between the hashing and this call would be
    remembered with the wrong hash.
    """
    if cache is None or not digests:
        return
    new = {os.path.abspath(p): {"state": file_state(p), "sha256": d} for p, d in digests.items() if os.path.isfile(p)}
    _store(cache, _load(cache) | new)


def _load(cache: str | Path) -> dict:
    try:
        loaded = json.loads(Path(cache).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}  # none yet, or unreadable: every file is simply read again
    return loaded if isinstance(loaded, dict) else {}


def _store(cache: str | Path, entries: dict) -> None:
    live = {}
    for path, entry in sorted(entries.items()):
        try:
            if isinstance(entry, dict) and file_state(path) == entry.get("state"):
                live[path] = entry
        except OSError:
            continue  # the file is gone
    try:
        write_bytes_atomic(cache, (json.dumps(live, sort_keys=True) + "\n").encode("utf-8"))
    except OSError:
        pass  # a folder that cannot be written only means the hashes are read again next time
