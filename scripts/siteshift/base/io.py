"""Atomic file writing, hashing and small table helpers."""
from __future__ import annotations

import contextlib
import hashlib
import json
import os
import tempfile
from pathlib import Path

import numpy as np


def _default(o):
    if isinstance(o, (np.integer,)):
        return int(o)
    if isinstance(o, (np.floating,)):
        return float(o)
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, (np.bool_,)):
        return bool(o)
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"cannot serialise {type(o)}")


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


@contextlib.contextmanager
def atomic_target(path, suffix=".part"):
    """Yield a temporary path beside `path`; on success it replaces `path`, else it is removed.

    The temporary file from mkstemp is private (0600); before the rename it gets the mode a plain
    open() would have given (0666 less the user's umask), so collaborators on a shared cluster
    read results as they read any other file the user writes.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=suffix)
    os.close(fd)
    try:
        yield tmp
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def atomic_write_text(path, text: str) -> Path:
    """Write via a temporary file in the same folder and rename: readers never see half a file."""
    with atomic_target(path) as tmp:
        Path(tmp).write_text(text)
    return Path(path)


def write_json(path, obj) -> Path:
    return atomic_write_text(path, json.dumps(obj, indent=2, default=_default) + "\n")


def read_json(path):
    return json.loads(Path(path).read_text())


def write_tsv(path, df) -> Path:
    return atomic_write_text(path, df.to_csv(sep="\t", index=False, float_format="%.6g"))


def stable_hash(obj, ndigits=6) -> str:
    """SHA-256 of a JSON rendering with floats rounded (coordinates to 1e-6 Å by default)."""
    def norm(o):
        if isinstance(o, float):
            return round(o, ndigits)
        if isinstance(o, dict):
            return {k: norm(v) for k, v in sorted(o.items())}
        if isinstance(o, (list, tuple)):
            return [norm(v) for v in o]
        if isinstance(o, np.ndarray):
            return norm(o.tolist())
        if isinstance(o, (np.floating, np.integer)):
            return norm(o.item())
        return o
    return hashlib.sha256(json.dumps(norm(obj), sort_keys=True).encode()).hexdigest()[:16]
