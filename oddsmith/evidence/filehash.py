"""SHA-256 of files, remembered per file state so that a large file is read once per change.

A hash is remembered under the file's path together with its state: size, modification
time (ns), inode and device. A remembered hash is used only while every part of the state
matches: any write (which moves the modification time), a new file renamed over the old one
(a new inode), or a ``touch`` makes the file be read again, once. What it cannot see is a
change that keeps the size and the inode and puts the modification time back to the
nanosecond (``touch -d`` after an in-place edit): that takes intent, and ``oddsmith verify``
reads every byte of a results folder whatever is remembered.

The status-change time is left out on purpose: a hard link (publication links every
artifact into ``results/``) changes it without changing a byte.

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
    """``[size, mtime_ns, inode, device]`` of ``path`` (links followed)."""
    info = os.stat(path)
    return [info.st_size, info.st_mtime_ns, info.st_ino, info.st_dev]


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
