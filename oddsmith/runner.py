"""The frame every Snakemake script runs in: log to the rule's log file, match the BLAS
threads to the rule's threads, run one package function, then write a provenance stamp.

A stamp (``results/<run>/provenance/<rule>[-<wildcards>].json``) records the rule, its
wildcards, the SHA-256 of each input and output, a hash of its params and the code
fingerprint. It is written last, so its presence means the job finished; the manifest
stage joins the stamps into the provenance graph.
"""

from __future__ import annotations

import ast
import functools
import gc
import hashlib
import logging
import os
import re
import sys
import threading
from pathlib import Path

from oddsmith.errors import ArgumentError, OddsmithError
from oddsmith.evidence.filehash import CACHE_PATH, sha256_remembered
from oddsmith.io import canonical_json, sha256_file, write_json

LOG_FORMAT = "%(levelname)s %(name)s: %(message)s"


#: Name of the module-level tuple by which a package module names the non-Python files it
#: makes the package read (templates, stylesheets, schemas), relative to the project folder,
#: e.g. ``RESOURCE_FILES = ("schemas/config.schema.yaml",)``. The import walk adds them to
#: the code fingerprint of every rule that runs the module.
RESOURCE_CONSTANT = "RESOURCE_FILES"


def code_fingerprint(modules, *, root: str | Path | None = None, extra_files=()) -> str:
    """SHA-256 over the source of the named package modules (and extra files), in order.

    Modules are named by their path in the package without ``.py`` (``"metrics"``,
    ``"stages/fit"``); extra files by their path (relative to the working directory).

    Examples
    --------
    >>> len(code_fingerprint(["io"]))
    64
    """
    root = Path(root).resolve() if root else PACKAGE_ROOT
    digest = hashlib.sha256()
    for name in sorted(set(modules)):
        digest.update(name.encode() + b"\0" + _read_bytes(root / f"{name}.py") + b"\0")
    for path in sorted(set(map(str, extra_files))):
        digest.update(path.encode() + b"\0" + _read_bytes(Path(path)) + b"\0")
    return digest.hexdigest()


def script_fingerprint(script: str | Path, *, root: str | Path | None = None) -> str:
    """Code fingerprint of a rule: its script, every package module the script imports
    (transitively, see :func:`code_closure`) and the resource files those modules name.

    Examples
    --------
    >>> script_fingerprint("scripts/split.py") == script_fingerprint("scripts/split.py")
    True
    """
    root = Path(root).resolve() if root else PACKAGE_ROOT
    modules, resources = code_closure(script, root=root)
    return code_fingerprint(modules, root=root, extra_files=[str(script), *resources])


def code_closure(script: str | Path, *, root: str | Path | None = None) -> tuple[list[str], list[str]]:
    """The package modules a script runs and the resource files they read.

    Follows every import of a package module (``import oddsmith.x``, ``from oddsmith.x
    import y``, ``from oddsmith import x``, relative imports, and imports inside functions)
    from the script through the package; a package's ``__init__`` counts as imported with
    it. Imports are read from the source with :mod:`ast`, never executed.

    Returns
    -------
    modules : list of str
        Sorted module names (``"stages/fit"``), the package ``__init__`` files included.
    resources : list of str
        Sorted paths named by the modules' ``RESOURCE_FILES`` constants.
    """
    root = Path(root).resolve() if root else PACKAGE_ROOT
    todo = list(_module_facts(Path(script).resolve(), "", root)[0])
    modules, resources = set(), set()
    while todo:
        name = todo.pop()
        if name in modules:
            continue
        modules.add(name)
        imports, named = _module_facts(root / f"{name}.py", name, root)
        todo += imports
        resources.update(named)
    return sorted(modules), sorted(resources)


PACKAGE_ROOT = Path(__file__).resolve().parent


def _read_bytes(path: Path) -> bytes:
    # Cached for the life of the process (a Snakemake invocation hashes each file once), by
    # absolute path so that a change of working directory cannot return another file.
    return _read_absolute(path.resolve())


@functools.lru_cache(maxsize=None)
def _read_absolute(path: Path) -> bytes:
    return path.read_bytes()


def clear_code_cache() -> None:
    """Forget the files read for code fingerprints (for a process that edits them)."""
    _read_absolute.cache_clear()
    _module_facts.cache_clear()


@functools.lru_cache(maxsize=None)
def _module_facts(path: Path, name: str, root: Path) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """Package modules imported by one source file (``name`` is its module name, ``""`` for a
    file outside the package) and the resource files it names."""
    tree = ast.Module(body=import_statements(_read_bytes(path).decode("utf-8")), type_ignores=[])
    package = name.rsplit("/", 1)[0] if "/" in name else ""
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            base = _absolute(node, package)
            if base is not None:
                found.add(base)
                found.update(f"{base}.{a.name}" for a in node.names)
    modules = set()
    for dotted in found:
        if dotted == "oddsmith" or dotted.startswith("oddsmith."):
            modules.update(_module_files(dotted.split(".")[1:], root))
    return tuple(sorted(modules)), _resource_files(tree, path)


#: A line that starts an import statement or the RESOURCE_FILES assignment (at any indent:
#: imports inside functions count).
_STATEMENT_START = re.compile(rf"^[ \t]*(?:import[ \t]|from[ \t]+[\w.]+[ \t]+import\b|{RESOURCE_CONSTANT}\b)")


def import_statements(source: str) -> list[ast.stmt]:
    """The import statements and the resource constant of a source file, parsed with
    :mod:`ast` one by one: the same imports as a parse of the whole file, at a fraction of
    the cost (a no-op ``snakemake -n`` reads every module a rule runs). A statement starts a
    line and runs on while brackets are open or a line ends with a backslash; a line of prose
    in a string that merely starts like an import does not parse and is left out."""
    lines, out, i = source.splitlines(), [], 0
    while i < len(lines):
        if not _STATEMENT_START.match(lines[i]):
            i += 1
            continue
        statement = [lines[i].strip()]
        depth = _depth(lines[i])
        while (depth > 0 or statement[-1].endswith("\\")) and i + 1 < len(lines):
            i += 1
            statement.append(lines[i].strip())
            depth += _depth(lines[i])
        try:
            out += ast.parse(" ".join(part.rstrip("\\") for part in statement)).body
        except SyntaxError:
            pass
        i += 1
    return out


def _depth(line: str) -> int:
    code = line.split("#", 1)[0]
    return sum(code.count(c) for c in "([{") - sum(code.count(c) for c in ")]}")


def _absolute(node: ast.ImportFrom, package: str) -> str | None:
    if node.level == 0:
        return node.module
    parts = ["oddsmith", *[p for p in package.split("/") if p]]
    parts = parts[: len(parts) - (node.level - 1)] if node.level > 1 else parts
    return ".".join(parts + ([node.module] if node.module else []))


def _module_files(parts: list[str], root: Path) -> set[str]:
    """Files Python runs to import ``oddsmith.<parts>``: each package's ``__init__`` on the
    way and the module itself; a name that is no file (an attribute) adds nothing more."""
    files = {"__init__"}
    for depth in range(1, len(parts) + 1):
        stem = "/".join(parts[:depth])
        if (root / stem / "__init__.py").is_file():
            files.add(f"{stem}/__init__")
        elif (root / f"{stem}.py").is_file():
            files.add(stem)
            break
        else:
            break
    return files


def _resource_files(tree: ast.Module, path: Path) -> tuple[str, ...]:
    for node in tree.body:
        targets = node.targets if isinstance(node, ast.Assign) else [node.target] if isinstance(node, ast.AnnAssign) else []
        if any(isinstance(t, ast.Name) and t.id == RESOURCE_CONSTANT for t in targets):
            value = ast.literal_eval(node.value)
            if not isinstance(value, (tuple, list)) or not all(isinstance(v, str) for v in value):
                raise ArgumentError(f"{path}: {RESOURCE_CONSTANT} must be a tuple of paths, found {value!r}")
            return tuple(value)
    return ()


def params_hash(params: dict) -> str:
    """Hash of a rule's params (canonical JSON)."""
    return hashlib.sha256(canonical_json(params)).hexdigest()


def _files(named) -> list[str]:
    out = []
    for item in named:
        out.extend([item] if isinstance(item, str) else list(item))
    return out


#: Rules whose extra threads run the job's own workers, with results that do not depend on
#: how many (BLAS stays at the config's threads: the rule passes ``blas_threads``):
#: evaluate's bootstrap shares its replicates among them, features its leakage screen's
#: features. Both run alone on the build's one path (features before the fits, evaluate
#: after compare), where a second core would otherwise idle. A rule asks for at least this
#: many threads (rules/common.smk); Snakemake lowers the request to ``--cores`` when fewer
#: are given. apply_cutoff can share its subgroup bootstrap the same way but asks for the
#: config's threads: the figures rule runs beside it (both follow threshold), which at 1M
#: rows brings the drawn figures 0.8 s sooner after a change of costs than 2 threads for
#: apply_cutoff followed by the figures (bench/README.md).
RULE_MIN_THREADS = {"features": 2, "evaluate": 2}


#: glibc ``mallopt`` settings of a job (parameter number → bytes): arrays up to 32 MB come from
#: the heap and freed memory stays with the process up to 1 GB, so that the many short-lived
#: temporaries of array work (a bootstrap block is 8 × 250,000 doubles at 1M rows) reuse
#: memory the process already holds instead of each costing fresh pages from the kernel.
ALLOCATOR_SETTINGS = {-3: 32 * 1024 * 1024,  # M_MMAP_THRESHOLD
                      -1: 1024 * 1024 * 1024}  # M_TRIM_THRESHOLD

#: The rules whose jobs run with :data:`ALLOCATOR_SETTINGS`: the fits (block-wise Gram
#: matrices and fold summaries; the trees' histograms) and the two bootstraps, all of them
#: block after block of such temporaries. Measured at 1M rows: evaluate's bootstrap 18.5 s
#: against 21.7 s with glibc's defaults, a logit fit job 12.5 s against 13.7 s, the trees
#: 136.5 s against 152.6 s (two builds an hour apart), each at the same peak (within 2%).
#: Not every job: memory kept for reuse still counts in a job's peak, and features, whose
#: raw columns go before its design is built, peaked at 690 MB tuned against 621 MB untuned
#: (2.5 × its data is 680 MB) while taking 8.2 s against 7.6 s; validate and threshold also
#: peaked higher and ran no faster.
TUNED_ALLOCATOR_RULES = frozenset({"fit", "challenger_fit", "evaluate", "apply_cutoff"})


def tune_allocator() -> bool:
    """Apply :data:`ALLOCATOR_SETTINGS` when the process runs on glibc; False elsewhere
    (another C library keeps its own behaviour: the results do not depend on it)."""
    import ctypes

    try:
        mallopt = ctypes.CDLL(None).mallopt
    except (OSError, AttributeError):
        return False
    mallopt.argtypes, mallopt.restype = [ctypes.c_int, ctypes.c_int], ctypes.c_int
    return all(mallopt(param, value) == 1 for param, value in ALLOCATOR_SETTINGS.items())


def stage(snakemake, function, *, blas_threads: int | None = None, **kwargs):
    """Run ``function(**kwargs)`` as the body of a Snakemake job, then stamp it.

    stderr and the ``oddsmith`` loggers go to ``snakemake.log[0]``; BLAS/OpenMP pools are
    limited to ``blas_threads`` (default ``snakemake.threads``): a rule whose extra threads
    run its own workers keeps BLAS at the config's threads, so its bytes do not depend on them.
    The C allocator is tuned for array work in :data:`TUNED_ALLOCATOR_RULES`. The output named
    ``stamp`` (if the rule has one) is written last.

    One of the project's own errors (:class:`~oddsmith.errors.OddsmithError`: bad data,
    config or artifact) is written to the log with its traceback and shown on the job's
    original stderr as one readable block, and the job exits with status 1 without a Python
    traceback on the terminal. Any other exception is a bug and propagates unchanged.
    """
    log_path = snakemake.log[0]
    Path(log_path).parent.mkdir(parents=True, exist_ok=True)
    handle = open(log_path, "w", encoding="utf-8")
    terminal = sys.__stderr__  # the job's own stderr, before it is sent to the log
    sys.stderr = handle
    logging.basicConfig(stream=handle, level=logging.INFO, format=LOG_FORMAT, force=True)
    from threadpoolctl import threadpool_limits

    if snakemake.rule in TUNED_ALLOCATOR_RULES:
        tune_allocator()
    try:
        with threadpool_limits(limits=int(blas_threads or snakemake.threads)):
            result = function(**kwargs)
    except OddsmithError as exc:
        logging.getLogger("oddsmith").error("%s failed", snakemake.rule, exc_info=True)
        handle.flush()
        if terminal is not None:
            terminal.write(failure_block(snakemake.rule, exc, log_path=log_path))
            terminal.flush()
        raise SystemExit(1) from None
    if "stamp" in snakemake.output.keys():
        write_stamp(snakemake)
    # The job's process ends here: what it allocated need not be collected object by object
    # at exit (0.25-0.3 s after the card's layout, whose boxes form many reference cycles).
    gc.freeze()
    return result


def failure_block(rule: str, exc: OddsmithError, *, log_path: str) -> str:
    """The text shown on the terminal when a job stops on one of the project's errors.

    Examples
    --------
    >>> from oddsmith.errors import ContractError
    >>> print(failure_block("validate", ContractError("bad", ["column 'x': ..."]), log_path="v.log"), end="")
    <BLANKLINE>
    oddsmith: rule validate stopped (ContractError)
    bad
      - column 'x': ...
    Nothing was written by this step. Full detail: v.log
    <BLANKLINE>
    """
    return (
        f"\noddsmith: rule {rule} stopped ({type(exc).__name__})\n{exc}\n"
        f"Nothing was written by this step. Full detail: {log_path}\n\n"
    )


def write_stamp(snakemake) -> None:
    """Write the provenance stamp of a finished job to its output named ``stamp``.

    Inputs are hashed through the project's remembered hashes (:mod:`oddsmith.evidence.filehash`): a
    file that several jobs read (the design, the validated data) is read by the first one to
    finish and not again while it is unchanged. The job's own outputs are always read (they
    are not remembered here: Snakemake touches a finished job's outputs, a new state).
    """
    stamp = snakemake.output.stamp
    params = {k: v for k, v in snakemake.params.items()}
    outputs = {p: sha256_file(p) for p in sorted(_files(snakemake.output)) if p != stamp and os.path.isfile(p)}
    inputs = sha256_remembered(sorted(p for p in _files(snakemake.input) if os.path.isfile(p)), cache=CACHE_PATH)
    record = {
        "rule": snakemake.rule,
        "wildcards": {k: v for k, v in snakemake.wildcards.items()},
        "inputs": dict(sorted(inputs.items())),
        "outputs": outputs,
        "params_sha256": params_hash(params),
        "code_sha256": params.get("code"),
    }
    write_json(stamp, record)


def cancel_idle_timers() -> int:
    """Cancel the :class:`threading.Timer` threads still waiting in this process; returns how many.

    Called by the Snakefile's ``onsuccess`` and ``onerror`` handlers, in Snakemake's own
    process. Snakemake's job rate limiter (--max-jobs-per-timespan, 100 per second by default)
    starts a non-daemon Timer each time it looks for jobs to run, to look again a second
    later. Once every job is done they have nothing left to do, but the interpreter waits
    for them before it exits: measured at 1.0-1.5 s of a 12 s rebuild after a change of
    costs (bench/README.md)."""
    timers = [t for t in threading.enumerate() if isinstance(t, threading.Timer)]
    for timer in timers:
        timer.cancel()
    return len(timers)
