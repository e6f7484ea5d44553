"""Remembered file hashes: a file is read once per change of its state, never trusted after one."""

from __future__ import annotations

import hashlib
import json
import os

import pytest

import oddsmith.evidence.filehash as filehash
from oddsmith.evidence.filehash import file_state, sha256_remembered


@pytest.fixture()
def reads(monkeypatch) -> list[str]:
    """The files actually read (each call of the hashing function)."""
    seen = []
    real = filehash.sha256_file

    def counting(path):
        seen.append(os.path.basename(str(path)))
        return real(path)

    monkeypatch.setattr(filehash, "sha256_file", counting)
    return seen


def test_an_unchanged_file_is_read_once(tmp_path, reads):
    data, cache = tmp_path / "data.csv", tmp_path / "cache.json"
    data.write_bytes(b"id,y\n1,0\n")
    first = sha256_remembered([data], cache=cache)
    second = sha256_remembered([data], cache=cache)
    assert first == second == {str(data): hashlib.sha256(b"id,y\n1,0\n").hexdigest()}
    assert reads == ["data.csv"]


def test_a_touched_file_is_read_again_and_gives_the_same_hash(tmp_path, reads):
    data, cache = tmp_path / "data.csv", tmp_path / "cache.json"
    data.write_bytes(b"id,y\n1,0\n")
    before = sha256_remembered([data], cache=cache)
    os.utime(data, ns=(data.stat().st_atime_ns, data.stat().st_mtime_ns + 10**9))
    assert sha256_remembered([data], cache=cache) == before
    assert reads == ["data.csv", "data.csv"]


def test_a_new_file_with_the_old_size_and_modification_time_is_read(tmp_path, reads):
    """New bytes saved the usual way (a new file renamed over the old one), same size, the
    old modification time put back: the inode differs, so the file is read."""
    data, cache = tmp_path / "data.csv", tmp_path / "cache.json"
    data.write_bytes(b"id,y\n1,0\n")
    old = data.stat()
    sha256_remembered([data], cache=cache)
    (tmp_path / "new.csv").write_bytes(b"id,y\n1,1\n")
    os.replace(tmp_path / "new.csv", data)
    os.utime(data, ns=(old.st_atime_ns, old.st_mtime_ns))
    assert sha256_remembered([data], cache=cache) == {str(data): hashlib.sha256(b"id,y\n1,1\n").hexdigest()}
    assert reads == ["data.csv", "data.csv"]


def test_an_in_place_edit_is_read(tmp_path, reads):
    """Same inode and size, a later modification time (any ordinary write): read again."""
    data, cache = tmp_path / "data.csv", tmp_path / "cache.json"
    data.write_bytes(b"id,y\n1,0\n")
    before = sha256_remembered([data], cache=cache)
    old = data.stat()
    with open(data, "r+b") as handle:
        handle.seek(8)
        handle.write(b"1")
    os.utime(data, ns=(old.st_atime_ns, old.st_mtime_ns + 1))
    assert sha256_remembered([data], cache=cache) != before
    assert reads == ["data.csv", "data.csv"]


def test_a_hard_link_does_not_make_the_file_be_read_again(tmp_path, reads):
    """Publication hard-links artifacts into results/: same bytes, same state."""
    data, cache = tmp_path / "data.csv", tmp_path / "cache.json"
    data.write_bytes(b"x\n")
    first = sha256_remembered([data], cache=cache)
    os.link(data, tmp_path / "linked.csv")
    assert sha256_remembered([data], cache=cache) == first
    assert reads == ["data.csv"]


def test_stale_entries_are_dropped(tmp_path, reads):
    out, gone, cache = tmp_path / "out.json", tmp_path / "gone.json", tmp_path / "cache.json"
    out.write_bytes(b"{}\n")
    gone.write_bytes(b"[]\n")
    sha256_remembered([out, gone], cache=cache)
    gone.unlink()
    out.write_bytes(b"{ }\n")
    sha256_remembered([out], cache=cache)
    entries = json.loads(cache.read_text())
    assert list(entries) == [str(out)] and entries[str(out)]["state"] == file_state(out)
    assert reads == ["out.json", "gone.json", "out.json"]


def test_without_a_cache_every_file_is_read_and_nothing_is_written(tmp_path, reads):
    data = tmp_path / "data.csv"
    data.write_bytes(b"x\n")
    sha256_remembered([data], cache=None)
    sha256_remembered([data], cache=None)
    assert reads == ["data.csv", "data.csv"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["data.csv"]


def test_an_unreadable_cache_only_means_reading_again(tmp_path, reads):
    data, cache = tmp_path / "data.csv", tmp_path / "cache.json"
    data.write_bytes(b"x\n")
    cache.write_text("not json")
    assert sha256_remembered([data], cache=cache) == {str(data): hashlib.sha256(b"x\n").hexdigest()}
    assert reads == ["data.csv"]
