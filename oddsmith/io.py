"""Deterministic, atomic writers and readers for artifacts (JSON, Parquet, text).

Every artifact is written to a temporary file in the same folder and renamed into place,
so a build killed mid-write never leaves a file that looks complete.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import tempfile
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import yaml

from oddsmith.errors import ArtifactError


def sha256_file(path: str | Path, *, chunk: int = 1 << 20) -> str:
    """SHA-256 of a file's bytes, as hex."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        while block := handle.read(chunk):
            digest.update(block)
    return digest.hexdigest()


def sha256_bytes(data: bytes) -> str:
    """SHA-256 of bytes, as hex."""
    return hashlib.sha256(data).hexdigest()


def _clean(value):
    """Make a value JSON-safe: numpy scalars to Python, NaN/inf to None."""
    if hasattr(value, "item") and not isinstance(value, (list, dict, str)):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    return value


def canonical_json(obj) -> bytes:
    """Canonical JSON bytes: sorted keys, 2-space indent, UTF-8, trailing newline."""
    text = json.dumps(_clean(obj), sort_keys=True, indent=2, ensure_ascii=False, allow_nan=False)
    return (text + "\n").encode("utf-8")


def write_bytes_atomic(path: str | Path, data: bytes) -> None:
    """Write bytes to ``path`` through a temporary file and an atomic rename."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".part")
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def write_json(path: str | Path, obj) -> None:
    """Write ``obj`` as canonical JSON, atomically."""
    write_bytes_atomic(path, canonical_json(obj))


def write_text(path: str | Path, text: str) -> None:
    """Write UTF-8 text atomically."""
    write_bytes_atomic(path, text.encode("utf-8"))


def read_json(path: str | Path):
    """Read a JSON artifact; a missing or malformed file raises ArtifactError naming it."""
    path = Path(path)
    if not path.is_file():
        raise ArtifactError(f"required artifact not found: {path}")
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise ArtifactError(f"artifact {path} is not valid JSON: {exc}") from None


def write_parquet(path: str | Path, frame) -> None:
    """Write a DataFrame as Parquet with stable bytes (no index, fixed compression)."""
    table = pa.Table.from_pandas(frame, preserve_index=False)
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".part")
    os.close(fd)
    try:
        pq.write_table(table, tmp, compression="zstd", write_statistics=True)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def read_parquet(path: str | Path, columns=None):
    """Read a Parquet artifact into pandas; a missing file raises ArtifactError naming it."""
    path = Path(path)
    if not path.is_file():
        raise ArtifactError(f"required artifact not found: {path}")
    return pq.read_table(path, columns=columns).to_pandas()


def read_yaml(path: str | Path, *, what: str, error=ArtifactError):
    """Read a YAML file; a missing or malformed file raises ``error`` naming ``what`` and the path."""
    path = Path(path)
    if not path.is_file():
        raise error(f"{what} not found: {path}")
    try:
        return yaml.safe_load(path.read_text(encoding="utf-8"))
    except yaml.YAMLError as exc:
        raise error(f"{what} {path} is not valid YAML: {exc}") from None
