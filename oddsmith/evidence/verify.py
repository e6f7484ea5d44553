"""Check a results folder against its manifest, without trusting anything in it.

``verify_results(run_dir)`` recomputes the SHA-256 of every file, compares the set of files
with the manifest (missing, extra, changed), follows every provenance link (each stamp's
output hashes against the files, each input hash against the file produced upstream or the
recorded raw input) and checks ``card/card.sha256`` against the card's files and the
manifest's own hash. It only reads bytes and parses JSON: nothing in the folder is imported
or run, no link is followed, and a path that would leave the folder is refused unread.

``rebuild_and_compare`` rebuilds the run from the recorded raw inputs with the current
checkout in a temporary folder and compares every hash.
"""

from __future__ import annotations

import hashlib
import json
import os
import posixpath
import re
import shlex
import shutil
import stat
import subprocess
import sys
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

from oddsmith import artifacts
from oddsmith.evidence.manifest import (CARD_DIR, FORMAT_NAME, FORMAT_VERSION, GIT_OVERRIDE_ENV, MANIFEST_NAME,
                               STAGING_DIR, config_sha256, git_state, is_hex_digest, run_files, run_relative,
                               unsafe_path_reason)
from oddsmith.io import canonical_json, sha256_file

MAX_MANIFEST_BYTES = 64 << 20
CARD_HASHES = artifacts.CARD_HASHES
_CARD_LINE = re.compile(r"^([0-9a-f]{64})  (\S(?:.*\S)?)$")
_FILE_KEYS = {"sha256", "size", "rule", "stamp", "inputs", "params_sha256", "code_sha256"}
_TOP_KEYS = {"format", "run", "config", "config_sha256", "files", "raw_inputs", "environment", "git",
             "source_date_epoch", "release"}


@dataclass
class Verification:
    """What ``check_results`` found: problems (any → not verified) and notes (informative)."""

    run_dir: str
    problems: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    manifest_sha256: str | None = None
    n_files: int = 0
    n_stamps: int = 0
    card: str = "absent"

    def summary(self) -> str:
        digest = (self.manifest_sha256 or "?")[:16]
        return (f"verified {self.run_dir}: {self.n_files} files and {self.n_stamps} provenance stamps match "
                f"manifest.json (sha256 {digest}…); card {self.card}")


def verify_results(run_dir) -> list[str]:
    """Problems found in a results folder (empty list: everything verified).

    Examples
    --------
    >>> verify_results("/nonexistent/results/demo")[0].startswith("results folder not found")
    True
    """
    return check_results(run_dir).problems


def check_results(run_dir) -> Verification:
    """Full check of a results folder; see the module docstring."""
    run_dir = Path(run_dir)
    report = Verification(run_dir=str(run_dir))
    if run_dir.is_symlink() or not run_dir.is_dir():
        report.problems.append(f"results folder not found or not a plain folder: {run_dir}")
        return report
    raw, manifest = read_manifest(run_dir, report.problems)
    if manifest is None:
        return report
    report.manifest_sha256 = hashlib.sha256(raw).hexdigest()
    entries = _check_structure(manifest, raw, report.problems)
    on_disk, partial, link_problems = run_files(run_dir)
    report.problems += link_problems
    # A leftover of an interrupted write is an extra file like any other: a verified folder
    # holds exactly what its manifest lists (the manifest stage clears them while building).
    on_disk = sorted(on_disk + partial)
    hashes = _check_files(run_dir, entries, on_disk, report.problems)
    report.problems += _extra_folders(run_dir, set(entries))
    report.n_files = len(hashes)
    report.n_stamps = _check_links(run_dir, manifest, entries, hashes, set(on_disk), report.problems)
    report.card = _check_card(run_dir, report.manifest_sha256, report.problems, report.notes)
    return report


def read_manifest(run_dir: Path, problems: list[str]) -> tuple[bytes | None, dict | None]:
    """Read and parse ``manifest.json`` defensively; on failure append the reason and return None."""
    path = run_dir / MANIFEST_NAME
    try:
        mode = path.lstat().st_mode
    except FileNotFoundError:
        problems.append(f"{MANIFEST_NAME} is missing from {run_dir}")
        return None, None
    if not stat.S_ISREG(mode):
        problems.append(f"{MANIFEST_NAME} is a symlink or not a regular file; refused")
        return None, None
    if path.stat().st_size > MAX_MANIFEST_BYTES:
        problems.append(f"{MANIFEST_NAME} is larger than {MAX_MANIFEST_BYTES} bytes; refused")
        return None, None
    raw = path.read_bytes()
    try:
        manifest = json.loads(raw.decode("utf-8"), object_pairs_hook=_no_duplicate_keys,
                              parse_constant=_no_constant)
    except (UnicodeDecodeError, ValueError) as exc:
        problems.append(f"{MANIFEST_NAME} is not valid JSON (truncated or edited?): {exc}")
        return raw, None
    if not isinstance(manifest, dict):
        problems.append(f"{MANIFEST_NAME} must hold a JSON object, found {type(manifest).__name__}")
        return raw, None
    fmt = manifest.get("format")
    match = re.fullmatch(rf"{FORMAT_NAME}/(\d+)", fmt) if isinstance(fmt, str) else None
    if not match:
        problems.append(f"{MANIFEST_NAME} is not an oddsmith manifest: format is {fmt!r}, "
                        f"expected '{FORMAT_NAME}/{FORMAT_VERSION}'")
        return raw, None
    if int(match.group(1)) > FORMAT_VERSION:
        problems.append(f"{MANIFEST_NAME} has format {fmt}, newer than this oddsmith reads "
                        f"({FORMAT_NAME}/{FORMAT_VERSION}); use a newer oddsmith")
        return raw, None
    return raw, manifest


def _no_duplicate_keys(pairs):
    keys = [k for k, _ in pairs]
    duplicated = sorted({k for k in keys if keys.count(k) > 1})
    if duplicated:
        raise ValueError(f"duplicate key(s) {duplicated}")
    return dict(pairs)


def _no_constant(name):
    raise ValueError(f"non-standard constant {name}")


def _check_structure(manifest: dict, raw: bytes, problems: list[str]) -> dict:
    """Check keys and types; return the file entries that are safe to look at."""
    missing = sorted(_TOP_KEYS - set(manifest))
    if missing:
        problems.append(f"{MANIFEST_NAME} lacks key(s) {missing}")
    if raw != canonical_json(manifest):
        problems.append(f"{MANIFEST_NAME} is not in the canonical form oddsmith writes (edited by hand?)")
    run = manifest.get("run")
    if not isinstance(run, str) or unsafe_path_reason(run) or "/" in run:
        problems.append(f"manifest run name {run!r} is not a plain folder name")
    config = manifest.get("config")
    if isinstance(config, dict):
        if manifest.get("config_sha256") != config_sha256(config):
            problems.append(f"config_sha256 {manifest.get('config_sha256')!r} does not match the recorded "
                            f"config (its hash is {config_sha256(config)})")
    else:
        problems.append("manifest config is not an object")
    git = manifest.get("git")
    if git is not None and not (isinstance(git, dict) and isinstance(git.get("dirty"), bool)):
        problems.append(f"manifest git must be null or {{commit, dirty}}, found {git!r}")
    for key, entry in _mapping(manifest, "raw_inputs", problems).items():
        if not isinstance(entry, dict) or not is_hex_digest(entry.get("sha256")) or not isinstance(entry.get("role"), str):
            problems.append(f"raw input {key!r}: malformed entry {entry!r}")
    entries = {}
    for path, entry in _mapping(manifest, "files", problems).items():
        reason = unsafe_path_reason(path)
        if reason is None and (path == MANIFEST_NAME or path.split("/")[0] == CARD_DIR):
            reason = "is reserved for the manifest or the card"
        if reason:
            problems.append(f"refused path {path!r} in manifest (not read): it {reason}")
            continue
        bad = _entry_problems(entry)
        if bad:
            problems.append(f"manifest entry {path}: {bad}")
            continue
        entries[path] = entry
    return entries


def _mapping(manifest: dict, key: str, problems: list[str]) -> dict:
    value = manifest.get(key)
    if isinstance(value, dict):
        return value
    problems.append(f"manifest {key} is not an object")
    return {}


def _entry_problems(entry) -> str | None:
    if not isinstance(entry, dict) or set(entry) != _FILE_KEYS:
        found = sorted(entry) if isinstance(entry, dict) else type(entry).__name__
        return f"expected keys {sorted(_FILE_KEYS)}, found {found}"
    if not is_hex_digest(entry["sha256"]) or not is_hex_digest(entry["params_sha256"]):
        return "sha256 and params_sha256 must be 64 hex digits"
    if not isinstance(entry["size"], int) or entry["size"] < 0:
        return f"size must be a whole number, found {entry['size']!r}"
    if not isinstance(entry["rule"], str) or not isinstance(entry["stamp"], str) or unsafe_path_reason(entry["stamp"]):
        return "rule and stamp must be names inside the folder"
    inputs = entry["inputs"]
    if not isinstance(inputs, dict) or not all(isinstance(k, str) and is_hex_digest(v) for k, v in inputs.items()):
        return "inputs must map paths to sha256 digests"
    return None


def _check_files(run_dir: Path, entries: dict, on_disk: list[str], problems: list[str]) -> dict:
    """Hash every file on disk; report missing, extra and changed ones. Returns found hashes."""
    found = {}
    for rel in on_disk:
        found[rel] = sha256_file(run_dir / rel)
        expected = entries.get(rel)
        if expected is None:
            problems.append(f"extra file not in the manifest: {rel} (sha256 {found[rel]}); {_clean_hint(run_dir, rel)}")
        elif expected["sha256"] != found[rel]:
            problems.append(f"changed: {rel} expected sha256 {expected['sha256']}, found {found[rel]}")
        elif expected["size"] != (run_dir / rel).stat().st_size:
            problems.append(f"changed: {rel} expected size {expected['size']}, found {(run_dir / rel).stat().st_size}")
    for rel in sorted(set(entries) - set(on_disk)):
        problems.append(f"missing: {rel} (expected sha256 {entries[rel]['sha256']})")
    return found


def _clean_hint(run_dir: Path, rel: str, *, folder: bool = False) -> str:
    """How to remove something oddsmith did not write from a results folder."""
    command = "rm -r" if folder else "rm"
    return (f"oddsmith did not write it as part of this result; delete it ({command} {shlex.quote(str(run_dir / rel))}) "
            "or publish the build again")


def _extra_folders(run_dir: Path, listed: set[str]) -> list[str]:
    """Folders (outside ``card/``) under which the manifest lists no file: empty ones, or ones
    holding only extra files (those are reported one by one as well)."""
    needed = {str(parent) for rel in listed for parent in Path(rel).parents if str(parent) != "."}
    problems = []
    for dirpath, dirnames, _ in os.walk(run_dir, followlinks=False):
        rel_dir = Path(dirpath).relative_to(run_dir)
        if rel_dir == Path("."):
            dirnames[:] = [d for d in dirnames if d != CARD_DIR]
        for name in sorted(dirnames):
            rel = (rel_dir / name).as_posix()
            if rel not in needed and not (Path(dirpath) / name).is_symlink():
                empty = not any(os.scandir(Path(dirpath) / name))
                problems.append(f"extra folder not in the manifest: {rel}/ ({'empty' if empty else 'no listed file under it'}); "
                                + _clean_hint(run_dir, rel, folder=True))
                dirnames.remove(name)
    return problems


def _check_links(run_dir: Path, manifest: dict, entries: dict, hashes: dict, on_disk: set, problems: list[str]) -> int:
    """Follow each stamp's recorded outputs and inputs; return the number of stamps read."""
    run = str(manifest.get("run"))
    raw_inputs = {posixpath.normpath(k): v for k, v in (manifest.get("raw_inputs") or {}).items()
                  if isinstance(v, dict)}
    by_stamp: dict[str, list[str]] = {}
    for rel, entry in entries.items():
        by_stamp.setdefault(entry["stamp"], []).append(rel)
    for stamp_rel, claimed in sorted(by_stamp.items()):
        stamp = _read_stamp(run_dir, stamp_rel, entries, on_disk, problems)
        if stamp is None:
            continue
        outputs = {}
        for path, digest in sorted(stamp["outputs"].items()):
            rel = run_relative(path, run)
            if rel is None or unsafe_path_reason(rel):
                problems.append(f"stamp {stamp_rel} names an output outside the results folder: {path!r} (refused)")
                continue
            outputs[rel] = digest
            if rel not in entries:
                problems.append(f"broken link: stamp {stamp_rel} records output {rel}, which the manifest lacks")
            elif entries[rel]["sha256"] != digest:
                problems.append(f"broken link: stamp {stamp_rel} records {rel} as sha256 {digest}, "
                                f"the manifest has {entries[rel]['sha256']}")
        for rel in sorted(set(claimed) - set(outputs) - {stamp_rel}):
            problems.append(f"broken link: manifest attributes {rel} to stamp {stamp_rel}, which does not list it")
        for key in ("rule", "inputs", "params_sha256", "code_sha256"):
            disagree = sorted(rel for rel in claimed if entries[rel][key] != stamp.get(key))
            if disagree:
                problems.append(f"broken link: stamp {stamp_rel} and the manifest disagree on {key} "
                                f"for {', '.join(disagree)}")
        _check_inputs(stamp_rel, stamp["inputs"], run, entries, hashes, raw_inputs, problems)
    return len(by_stamp)


def _read_stamp(run_dir: Path, stamp_rel: str, entries: dict, on_disk: set, problems: list[str]) -> dict | None:
    if stamp_rel not in entries:
        problems.append(f"broken link: stamp {stamp_rel} is named in the manifest but not recorded as a file")
        return None
    if stamp_rel not in on_disk:
        return None  # already reported as missing
    try:
        stamp = json.loads((run_dir / stamp_rel).read_text(encoding="utf-8"))
    except (UnicodeDecodeError, ValueError) as exc:
        problems.append(f"stamp {stamp_rel} is not valid JSON: {exc}")
        return None
    ok = (isinstance(stamp, dict) and isinstance(stamp.get("outputs"), dict)
          and isinstance(stamp.get("inputs"), dict) and "params_sha256" in stamp and "code_sha256" in stamp)
    if not ok:
        problems.append(f"stamp {stamp_rel} lacks rule/inputs/outputs/params_sha256/code_sha256")
        return None
    return stamp


def _check_inputs(stamp_rel, inputs, run, entries, hashes, raw_inputs, problems) -> None:
    for path, digest in sorted(inputs.items()):
        rel = run_relative(path, run)
        if rel is not None:
            if unsafe_path_reason(rel) or rel not in entries:
                problems.append(f"broken link: stamp {stamp_rel} read {path}, which the manifest lacks")
                continue
            upstream = hashes.get(rel, entries[rel]["sha256"])
            if upstream != digest:
                problems.append(f"broken link: stamp {stamp_rel} read {rel} with sha256 {digest}, "
                                f"but the file produced upstream has sha256 {upstream}")
        else:
            recorded = raw_inputs.get(posixpath.normpath(path))
            if recorded is None:
                problems.append(f"broken link: stamp {stamp_rel} read {path}, which is not a recorded raw input")
            elif recorded["sha256"] != digest:
                problems.append(f"broken link: stamp {stamp_rel} read {path} with sha256 {digest}, "
                                f"the manifest records the raw input as {recorded['sha256']}")


def _check_card(run_dir: Path, manifest_sha256: str, problems: list[str], notes: list[str]) -> str:
    """Check ``card/`` against ``card/card.sha256`` and the manifest hash; describe the card."""
    card_dir = run_dir / CARD_DIR
    if not card_dir.exists() and not card_dir.is_symlink():
        notes.append("no card/ folder: the card has not been rendered")
        return "absent"
    if card_dir.is_symlink() or not card_dir.is_dir():
        problems.append(f"{CARD_DIR} is a symlink or not a folder; refused")
        return "refused"
    present = _card_files(card_dir, problems)
    if CARD_HASHES not in present:
        problems.append(f"{CARD_HASHES} is missing, so the card's files cannot be checked")
        return "unchecked"
    listed = _card_hash_lines((run_dir / CARD_HASHES).read_bytes(), problems)
    if MANIFEST_NAME not in listed:
        problems.append(f"{CARD_HASHES} does not name {MANIFEST_NAME}, so the card is not bound to this manifest")
    elif listed[MANIFEST_NAME] != manifest_sha256:
        problems.append(f"{CARD_HASHES} was rendered from a different manifest: it records sha256 "
                        f"{listed[MANIFEST_NAME]}, manifest.json has {manifest_sha256}")
    for rel, digest in sorted(listed.items()):
        if rel == MANIFEST_NAME:
            continue
        if rel not in present:
            problems.append(f"missing: {rel} (listed in {CARD_HASHES} with sha256 {digest})")
        elif (found := sha256_file(run_dir / rel)) != digest:
            problems.append(f"changed: {rel} expected sha256 {digest} (from {CARD_HASHES}), found {found}")
    for rel in sorted(present - set(listed) - {CARD_HASHES}):
        problems.append(f"extra file in {CARD_DIR}/ not listed in {CARD_HASHES}: {rel}; {_clean_hint(run_dir, rel)}")
    return f"bound to this manifest ({len(listed) - 1} files)" if listed.get(MANIFEST_NAME) == manifest_sha256 else "NOT bound"


def _card_files(card_dir: Path, problems: list[str]) -> set[str]:
    present = set()
    for dirpath, dirnames, filenames in os.walk(card_dir, followlinks=False):
        for name in sorted(dirnames + filenames):
            full = Path(dirpath) / name
            rel = f"{CARD_DIR}/{full.relative_to(card_dir).as_posix()}"
            mode = full.lstat().st_mode
            if stat.S_ISLNK(mode):
                problems.append(f"{rel} is a symlink (to {os.readlink(full)}); a results folder holds only regular files")
            elif stat.S_ISREG(mode):
                present.add(rel)
            elif stat.S_ISDIR(mode):
                if not any(os.scandir(full)):
                    problems.append(f"extra folder in {CARD_DIR}/: {rel}/ (empty); "
                                    + _clean_hint(card_dir.parent, rel, folder=True))
            else:
                problems.append(f"{rel} is not a regular file")
    return present


def _card_hash_lines(data: bytes, problems: list[str]) -> dict[str, str]:
    listed = {}
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        problems.append(f"{CARD_HASHES} is not UTF-8 text")
        return listed
    for number, line in enumerate(text.splitlines(), start=1):
        match = _CARD_LINE.match(line)
        if not match:
            problems.append(f"{CARD_HASHES} line {number} is not '<sha256>  <path>': {line[:80]!r}")
            continue
        digest, rel = match.groups()
        if unsafe_path_reason(rel) or not (rel == MANIFEST_NAME or rel.startswith(f"{CARD_DIR}/")):
            problems.append(f"{CARD_HASHES} line {number} names a path outside the card: {rel!r} (refused, not read)")
            continue
        listed[rel] = digest
    return listed


# ---- rebuild from the recorded inputs ----

#: What a rebuild copies from the checkout (never from the folder being checked).
PROJECT_PARTS = ("Snakefile", "rules", "scripts", "schemas", "config", "reports", "oddsmith")


def default_project_dir() -> Path:
    """The checkout to rebuild with when ``--project`` is not given: the working folder."""
    return Path.cwd()


def rebuild_and_compare(run_dir, *, project_dir=None, workdir=None, cores: int = 2) -> list[str]:
    """Rebuild a run from its recorded raw inputs with the current checkout; list differences.

    The workflow, scripts, schemas, templates and package are copied from ``project_dir``
    (default: ``default_project_dir()``), the raw data and config files recorded in the
    manifest are taken from the same checkout after checking their hashes, and the build runs
    in ``workdir`` (default: a temporary folder, removed afterwards) with the recorded
    configuration file, SOURCE_DATE_EPOCH and git state. The rebuild's staging folder
    (``work/<run>``) is compared with the recorded one: every file hash, the manifest and
    ``card.sha256``.
    """
    run_dir = Path(run_dir)
    problems: list[str] = []
    _, manifest = read_manifest(run_dir, problems)
    if manifest is None:
        return problems
    project_dir = Path(project_dir) if project_dir else default_project_dir()
    if not (project_dir / "Snakefile").is_file():
        return [f"cannot rebuild: {project_dir.resolve()} is not an oddsmith project checkout (no Snakefile); "
                "run from the checkout or give --project DIR"]
    temporary = workdir is None
    work = Path(tempfile.mkdtemp(prefix="oddsmith-rebuild-")) if temporary else Path(workdir)
    try:
        problems += _stage_project(manifest, project_dir, work)
        if problems:
            return problems
        problems += _run_rebuild(manifest, run_dir, work, cores=cores)
        if problems:
            return problems
        return _compare_runs(run_dir, work / STAGING_DIR / manifest["run"])
    finally:
        if temporary:
            shutil.rmtree(work, ignore_errors=True)


def _stage_project(manifest: dict, project_dir: Path, work: Path) -> list[str]:
    """Copy the checkout's workflow into ``work`` and put the recorded raw inputs in place."""
    problems = []
    work.mkdir(parents=True, exist_ok=True)
    if any(work.iterdir()):
        return [f"cannot rebuild: work folder {work} is not empty"]
    for part in PROJECT_PARTS:
        src = project_dir / part
        if src.is_dir():
            shutil.copytree(src, work / part, ignore=shutil.ignore_patterns("__pycache__", "*.egg-info"))
        elif src.is_file():
            shutil.copy2(src, work / part)
    for rel, entry in sorted(manifest.get("raw_inputs", {}).items()):
        reason = unsafe_path_reason(rel)
        if reason:
            problems.append(f"cannot rebuild: raw input path {rel!r} {reason}; put the file inside the project")
            continue
        src = project_dir / rel
        if not src.is_file():
            problems.append(f"cannot rebuild: recorded raw input {rel} not found in {project_dir}")
        elif (found := sha256_file(src)) != entry["sha256"]:
            problems.append(f"cannot rebuild: raw input {rel} in {project_dir} has sha256 {found}, "
                            f"the results were built from {entry['sha256']}")
        else:
            (work / rel).parent.mkdir(parents=True, exist_ok=True)
            shutil.copyfile(src, work / rel)
    return problems


def _run_rebuild(manifest: dict, run_dir: Path, work: Path, *, cores: int) -> list[str]:
    run = manifest["run"]
    configs = _config_files(manifest)
    if len(configs) != 1:
        return [f"cannot rebuild: the manifest records {len(configs)} configuration files ({', '.join(configs) or 'none'}); "
                "a build reads exactly one (results made by an oddsmith that merged a base configuration "
                "are rebuilt with the checkout they were made with)"]
    targets = [f"{STAGING_DIR}/{run}/{MANIFEST_NAME}"]
    if (run_dir / CARD_HASHES).is_file():
        targets.append(f"{STAGING_DIR}/{run}/{CARD_HASHES}")
    # --configfile takes one or more values: it comes last, so that no target is read as a config file
    cmd = [sys.executable, "-m", "snakemake", "--cores", str(cores), "--nocolor", *targets, "--configfile", configs[0]]
    env = dict(os.environ)
    env["SOURCE_DATE_EPOCH"] = str(manifest["source_date_epoch"])
    env[GIT_OVERRIDE_ENV] = json.dumps(manifest["git"])
    if (work / "oddsmith").is_dir():
        env["PYTHONPATH"] = os.pathsep.join([str(work), env.get("PYTHONPATH", "")]).rstrip(os.pathsep)
    done = subprocess.run(cmd, cwd=work, env=env, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        return [f"rebuild failed (exit {done.returncode}):\n{done.stderr[-3000:]}"]
    return []


def _config_files(manifest: dict) -> list[str]:
    """The recorded raw inputs that are configuration files."""
    return [p for p, entry in sorted(manifest.get("raw_inputs", {}).items()) if entry.get("role") == "config"]


def _compare_runs(recorded_dir: Path, rebuilt_dir: Path) -> list[str]:
    """Every difference between the recorded run and the rebuilt one."""
    problems = []
    recorded = json.loads((recorded_dir / MANIFEST_NAME).read_text(encoding="utf-8"))
    rebuilt = json.loads((rebuilt_dir / MANIFEST_NAME).read_text(encoding="utf-8"))
    old, new = recorded.get("files", {}), rebuilt.get("files", {})
    for rel in sorted(set(old) | set(new)):
        a, b = old.get(rel, {}).get("sha256"), new.get(rel, {}).get("sha256")
        if a is None:
            problems.append(f"rebuild made a file the results lack: {rel}")
        elif b is None:
            problems.append(f"rebuild did not make {rel}")
        elif a != b:
            problems.append(f"rebuilt {rel} differs: recorded sha256 {a}, rebuilt {b}")
    for key in sorted((set(recorded) | set(rebuilt)) - {"files"}):
        if recorded.get(key) != rebuilt.get(key):
            problems.append(f"rebuilt manifest differs in {key}: {_short_difference(recorded.get(key), rebuilt.get(key))}")
    a, b = sha256_file(recorded_dir / MANIFEST_NAME), sha256_file(rebuilt_dir / MANIFEST_NAME)
    if a != b and not problems:
        problems.append(f"rebuilt manifest.json differs in bytes: recorded {a}, rebuilt {b}")
    recorded_card, rebuilt_card = recorded_dir / CARD_HASHES, rebuilt_dir / CARD_HASHES
    if recorded_card.is_file():
        if not rebuilt_card.is_file():
            problems.append(f"rebuild made no {CARD_HASHES}")
        elif recorded_card.read_bytes() != rebuilt_card.read_bytes():
            problems.append(f"rebuilt {CARD_HASHES} differs:\n  recorded: "
                            + recorded_card.read_text(encoding="utf-8", errors="replace").strip().replace("\n", "\n            ")
                            + "\n  rebuilt:  "
                            + rebuilt_card.read_text(encoding="utf-8", errors="replace").strip().replace("\n", "\n            "))
    return problems


def _short_difference(a, b, path: str = "") -> str:
    """The first few key paths at which two JSON values differ."""
    found = []
    _walk_difference(a, b, path, found)
    return "; ".join(found[:8]) + (f"; … ({len(found)} in all)" if len(found) > 8 else "")


def _walk_difference(a, b, path: str, found: list[str]) -> None:
    if isinstance(a, dict) and isinstance(b, dict):
        for key in sorted(set(a) | set(b)):
            _walk_difference(a.get(key), b.get(key), f"{path}.{key}" if path else str(key), found)
    elif a != b:
        found.append(f"{path or '(value)'} recorded {json.dumps(a)[:60]}, rebuilt {json.dumps(b)[:60]}")


def describe_checkout(manifest: dict, project_dir: Path) -> str | None:
    """A note when the checkout used for a rebuild is not at the recorded commit."""
    recorded, current = manifest.get("git"), git_state(project_dir)
    if recorded and current and recorded.get("commit") != current.get("commit"):
        return (f"the checkout is at commit {current['commit'][:12]}, the results were built at "
                f"{recorded['commit'][:12]}: code differences will show as hash differences")
    return None


# ---- command line ----

def register(sub) -> None:
    """Add ``oddsmith verify`` to the command line."""
    p = sub.add_parser("verify", help="check a results folder against its manifest (hashes, provenance, card)")
    p.add_argument("results", help="the results folder, e.g. results/lease_demo or releases/<run>/<version>")
    p.add_argument("--rebuild", action="store_true",
                   help="also rebuild from the recorded raw inputs in a temporary folder and compare every hash")
    p.add_argument("--project", help="checkout to rebuild with and to take raw inputs from "
                                     "(default: the current folder)")
    p.add_argument("--keep", metavar="DIR", help="rebuild in DIR (must be empty) and keep it")
    p.add_argument("--cores", type=int, default=2, help="cores for the rebuild (default: %(default)s)")
    p.set_defaults(func=_cmd_verify)


def _cmd_verify(args) -> int:
    report = check_results(args.results)
    problems = list(report.problems)
    notes = list(report.notes)
    if args.rebuild and not any(p.startswith(MANIFEST_NAME) for p in problems):
        project = Path(args.project) if args.project else default_project_dir()
        _, manifest = read_manifest(Path(args.results), [])
        note = describe_checkout(manifest, project) if manifest else None
        notes += [note] if note else []
        problems += rebuild_and_compare(args.results, project_dir=project, workdir=args.keep, cores=args.cores)
    for note in notes:
        print(f"note: {note}")
    if problems:
        print(f"NOT verified: {args.results} — {len(problems)} problem(s):")
        for problem in problems:
            print(f"  - {problem}")
        return 1
    print(report.summary() + ("; rebuild reproduced every hash" if args.rebuild else ""))
    return 0
