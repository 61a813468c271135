"""The data's side of scoring (:class:`harness.metrics.DataSide`), made once per dataset of a run.

A run scores every embedding of a dataset against the same data, so what
scoring needs from the data alone is made once, in the parent, staged beside
the dataset's array as ``.npy`` files, and memory-mapped by every cell of that
dataset.  Read back, each file's shape, type and CRC-32 are checked against the
record written with it; a file that does not match is not used (the cell
computes its data side itself, with the same result) and the reason is logged.
"""

from __future__ import annotations

import json
import logging
import zlib
from collections.abc import Iterable
from dataclasses import fields
from pathlib import Path
from typing import Any

import numpy as np

from ..config import Scoring
from ..datasets import Dataset
from ..metrics import DataSide, prepare_data
from ..metrics._global import DataPairs
from .cells import Cell

log = logging.getLogger(__name__)

#: Folder of a staged dataset that holds its data side.
FOLDER = "scoring-side"
_RECORD = "side.json"


def wanted(cells: Iterable[Cell]) -> set[str]:
    """Datasets worth a shared data side: two or more cells score against all of their points."""
    counts: dict[str, int] = {}
    for cell in cells:
        if cell.holdout is None:
            counts[cell.dataset] = counts.get(cell.dataset, 0) + 1
    return {name for name, count in counts.items() if count >= 2}


def make(dataset: Dataset, scoring: Scoring) -> DataSide | None:
    """The dataset's data side for these settings, or ``None`` when it cannot be made (logged)."""
    data = dataset.distances if dataset.is_precomputed else dataset.X
    try:
        return prepare_data(
            data,
            metric="precomputed" if dataset.is_precomputed else "euclidean",
            latent=dataset.latent,
            **scoring.engine_options(),
        )
    except (ValueError, MemoryError) as exc:  # each cell will meet (and report) the same problem itself
        log.info("no shared data side for %s: %s", dataset.name, exc)
        return None


def _arrays(side: DataSide) -> dict[str, np.ndarray]:
    out: dict[str, np.ndarray] = {}
    for f in fields(DataPairs):
        value = getattr(side.pairs, f.name)
        if isinstance(value, np.ndarray):
            out[f.name] = value
        elif isinstance(value, tuple):
            out.update({f"{f.name}.{i}": part for i, part in enumerate(value)})
    if side.area_ranks is not None:
        out["area_ranks"] = side.area_ranks
    return out


def _crc(array: np.ndarray) -> int:
    return zlib.crc32(np.ascontiguousarray(array).view(np.uint8).data)


def stage(side: DataSide, where: Path) -> None:
    """Write ``side`` to ``where/scoring-side/``: one ``.npy`` per array and a record of them."""
    folder = where / FOLDER
    folder.mkdir(parents=True, exist_ok=True)
    files: dict[str, Any] = {}
    for name, array in _arrays(side).items():
        array = np.ascontiguousarray(array)
        np.save(folder / f"{name}.npy", array)
        files[name] = {"shape": list(array.shape), "dtype": array.dtype.str, "crc32": _crc(array)}
    record = {"n": side.n, "settings": dict(side.settings), "exact": side.pairs.exact, "files": files}
    (folder / _RECORD).write_text(json.dumps(record), encoding="utf-8")


def load(where: Path) -> DataSide | None:
    """The staged data side of ``where`` (memory-mapped, checked), or ``None`` (absent or not trusted)."""
    folder = where / FOLDER
    if not (folder / _RECORD).is_file():
        return None
    try:
        record = json.loads((folder / _RECORD).read_text(encoding="utf-8"))
        arrays: dict[str, np.ndarray] = {}
        for name, facts in record["files"].items():
            array = np.load(folder / f"{name}.npy", mmap_mode="r", allow_pickle=False)
            if list(array.shape) != facts["shape"] or array.dtype.str != facts["dtype"]:
                raise ValueError(f"{name}.npy: shape or type differs from its record")
            if _crc(array) != facts["crc32"]:
                raise ValueError(f"{name}.npy: checksum differs from its record")
            arrays[name] = array
        return _side(record, arrays)
    except (OSError, ValueError, KeyError, TypeError) as exc:
        log.warning("the staged data side in %s is not used (%s); computing it in the cell", folder, exc)
        return None


def _side(record: dict[str, Any], arrays: dict[str, np.ndarray]) -> DataSide:
    values: dict[str, Any] = {"exact": bool(record["exact"])}
    for f in fields(DataPairs):
        if f.name == "exact":
            continue
        if f.name in arrays:
            values[f.name] = arrays[f.name]
        elif f"{f.name}.0" in arrays:
            values[f.name] = tuple(arrays[f"{f.name}.{i}"] for i in range(4))
        else:
            values[f.name] = None
    if values["d"] is None or values["d_ranks"] is None:
        raise ValueError("the pair distances or their ranks are missing")
    return DataSide(int(record["n"]), record["settings"], DataPairs(**values), arrays.get("area_ranks"))
