"""The frame every Snakemake script runs in: log to the rule's log file, match the BLAS
threads to the rule's threads, run one package function, then write a provenance stamp.

A stamp (``results/<run>/provenance/<rule>[-<wildcards>].json``) records the rule, its
wildcards, the SHA-256 of each input and output, a hash of its params and the code
fingerprint. It is written last, so its presence means the job finished; the manifest
stage joins the stamps into the provenance graph.
"""

from __future__ import annotations

import hashlib
import logging
import os
import sys
from pathlib import Path

from oddsmith.errors import OddsmithError
from oddsmith.io import canonical_json, sha256_file, write_json

LOG_FORMAT = "%(levelname)s %(name)s: %(message)s"


def code_fingerprint(modules, *, root: str | Path | None = None, extra_files=()) -> str:
    """SHA-256 over the source of the named package modules (and extra files), in order.

    Examples
    --------
    >>> len(code_fingerprint(["io"]))
    64
    """
    root = Path(root) if root else Path(__file__).resolve().parent
    digest = hashlib.sha256()
    for name in sorted(set(modules)):
        path = root / f"{name}.py"
        digest.update(name.encode() + b"\0" + path.read_bytes() + b"\0")
    for path in sorted(map(str, extra_files)):
        digest.update(path.encode() + b"\0" + Path(path).read_bytes() + b"\0")
    return digest.hexdigest()


def params_hash(params: dict) -> str:
    """Hash of a rule's params (canonical JSON)."""
    return hashlib.sha256(canonical_json(params)).hexdigest()


def _files(named) -> list[str]:
    out = []
    for item in named:
        out.extend([item] if isinstance(item, str) else list(item))
    return out


def stage(snakemake, function, **kwargs):
    """Run ``function(**kwargs)`` as the body of a Snakemake job, then stamp it.

    stderr and the ``oddsmith`` loggers go to ``snakemake.log[0]``; BLAS/OpenMP pools are
    limited to ``snakemake.threads``. The output named ``stamp`` (if the rule has one) is
    written last.

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

    try:
        with threadpool_limits(limits=int(snakemake.threads)):
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
    """Write the provenance stamp of a finished job to its output named ``stamp``."""
    stamp = snakemake.output.stamp
    params = {k: v for k, v in snakemake.params.items()}
    outputs = [p for p in _files(snakemake.output) if p != stamp]
    record = {
        "rule": snakemake.rule,
        "wildcards": {k: v for k, v in snakemake.wildcards.items()},
        "inputs": {p: sha256_file(p) for p in sorted(_files(snakemake.input)) if os.path.isfile(p)},
        "outputs": {p: sha256_file(p) for p in sorted(outputs) if os.path.isfile(p)},
        "params_sha256": params_hash(params),
        "code_sha256": params.get("code"),
    }
    write_json(stamp, record)
