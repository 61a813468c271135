"""Atomic file writes: a temporary name in the same folder, flushed to disk, then renamed.

A half-written file therefore never counts: a reader sees the old file or the
new one.  Every file foldbench writes goes through here.

``durable=False`` skips the two flushes (the file's and its folder's), which cost
about 10 ms a file on a busy disk.  It is for files whose readers verify them
against a seal before use (cell records and their arrays, cache entries): after
a power cut such a file may be empty or missing, is then found unverifiable, and
the cell is computed again.  Manifests, tables and reports stay durable.
"""

from __future__ import annotations

import io
import json
import math
import os
import tempfile
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

_UMASK = os.umask(0)
os.umask(_UMASK)


def _fsync_dir(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def write_bytes(path: Path, data: bytes, *, durable: bool = True) -> None:
    """Write ``data`` to ``path`` atomically (temporary name, fsync unless not ``durable``, rename)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        os.fchmod(fd, 0o666 & ~_UMASK)  # mkstemp makes files private; results are meant to be shared
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            if durable:
                os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    if durable:
        _fsync_dir(path.parent)


def write_text(path: Path, text: str, *, durable: bool = True) -> None:
    """Write text atomically (UTF-8)."""
    write_bytes(path, text.encode("utf-8"), durable=durable)


def write_json(path: Path, obj: Any, *, durable: bool = True) -> None:
    """Write JSON atomically; NaN and infinity become ``null``."""
    write_text(path, json.dumps(jsonable(obj), indent=2, sort_keys=False) + "\n", durable=durable)


def write_npy(path: Path, array: np.ndarray, *, durable: bool = True) -> None:
    """Save an array as ``.npy`` atomically."""
    buf = io.BytesIO()
    np.save(buf, np.asarray(array), allow_pickle=False)
    write_bytes(path, buf.getvalue(), durable=durable)


def write_csv(path: Path, frame: pd.DataFrame, *, durable: bool = True) -> None:
    """Save a DataFrame as CSV atomically."""
    write_text(path, frame.to_csv(index=False), durable=durable)


def jsonable(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, (np.floating, float)):
        return None if not math.isfinite(float(obj)) else float(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj
