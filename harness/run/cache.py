"""A content-addressed cache of fitted embeddings, shared across runs and suites.

An entry is named by a hash of everything that decides the embedding: the
dataset's fingerprint, the method (for a plug-in also its package version and
the bytes of its module file), its parameters, the output dimension, the seed,
and the versions of the libraries that compute it.  Change any of them and the
entry is simply not found.  Each entry also keeps the scores of its embedding
under every scoring setting it was scored with, so a finished cell run again
with the same settings costs neither a fit nor a score.  Only the parent process
writes entries (atomically); children only read.
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import logging
import shutil
from dataclasses import asdict, dataclass
from functools import cache, lru_cache
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import platformdirs

from ..config import CellStatus, Scoring
from ..methods import METHODS
from .atomic import write_json, write_npy
from .cells import Cell, CellResult, KnownFit
from .manifest import package_versions

log = logging.getLogger(__name__)

#: Libraries whose version can change a fitted embedding.
_RESULT_PACKAGES = ("foldbench", "numpy", "scipy", "scikit-learn")


def default_cache_dir() -> Path:
    """``$XDG_CACHE_HOME/foldbench`` or the platform's equivalent."""
    return Path(platformdirs.user_cache_dir("foldbench", appauthor=False))


@cache
def _plugin_identity(use: str) -> str:
    module = use.split(":", 1)[0]
    versions = package_versions((module,))
    extra = {k: v for k, v in versions.items() if k not in package_versions()}
    try:
        spec = importlib.util.find_spec(module)
        origin = spec.origin if spec else None
        code = hashlib.sha256(Path(origin).read_bytes()).hexdigest()[:16] if origin else "?"
    except (ImportError, OSError, ValueError):
        code = "?"
    return json.dumps({"packages": extra, "module_sha": code}, sort_keys=True)


@lru_cache(maxsize=1)
def _library_versions() -> str:
    versions = package_versions()
    return json.dumps({k: versions.get(k) for k in _RESULT_PACKAGES}, sort_keys=True)


def cache_key(cell: Cell) -> str:
    """The content address of a cell's embedding (32 hex characters)."""
    doc = {
        "data": cell.data_fingerprint,
        "use": cell.use,
        "plugin": _plugin_identity(cell.use) if ":" in cell.use else None,
        "params": [[k, repr(v)] for k, v in cell.params],
        "dimensions": cell.dimensions,
        "seed": cell.seed,
        "libraries": _library_versions(),
    }
    spec = METHODS.get(cell.use)
    if spec is not None and spec.content_identity is not None:
        doc["content"] = spec.content_identity(cell.params_dict())
    package = _method_package(cell.use)
    if package is not None:
        # Only methods from optional packages carry this, so base-install keys stay as they were.
        doc["method_package"] = package
    return hashlib.sha256(json.dumps(doc, sort_keys=True).encode()).hexdigest()[:32]


def _method_package(use: str) -> str | None:
    spec = METHODS.get(use)
    if spec is None or not spec.requires:
        return None
    return f"{spec.requires[1]}=={spec.package_version()}"


def scoring_digest(scoring: Scoring) -> str:
    """Hash of the scoring settings and the measuring code's version (a cached score's name)."""
    doc = {"scoring": asdict(scoring), "libraries": _library_versions()}
    return hashlib.sha256(json.dumps(doc, sort_keys=True, default=str).encode()).hexdigest()[:16]


def _float(value: Any) -> float:
    return float("nan") if value is None else float(value)


def _floats(values: dict[str, Any]) -> dict[str, float]:
    return {k: _float(v) for k, v in values.items()}


def _intervals(values: Any) -> dict[str, tuple[float, float]] | None:
    """``{measure: (low, high)}`` read back, or ``None`` when missing or not of that shape."""
    if not isinstance(values, dict):
        return None
    out = {}
    for k, v in values.items():
        if not isinstance(v, list) or len(v) != 2:
            return None
        out[str(k)] = (_float(v[0]), _float(v[1]))
    return out


@dataclass(frozen=True)
class EmbeddingCache:
    """The cache folder: ``<root>/<2 hex>/<key>.npy`` plus ``<key>.json``.

    Parameters
    ----------
    root : Path
        Folder of the cache (created on first write).
    """

    root: Path

    def _paths(self, key: str) -> tuple[Path, Path]:
        folder = self.root / key[:2]
        return folder / f"{key}.npy", folder / f"{key}.json"

    def get(self, cell: Cell) -> KnownFit | None:
        """The cached embedding of ``cell``, or ``None``."""
        npy, meta = self._paths(cache_key(cell))
        try:
            info = json.loads(meta.read_text(encoding="utf-8"))
            embedding = np.load(npy, allow_pickle=False)
        except (OSError, ValueError):
            return None
        if embedding.shape[1:] != (cell.dimensions,):
            return None
        return KnownFit(
            embedding, float(info.get("fit_seconds") or np.nan), float(info.get("fit_peak_mb") or np.nan)
        )

    def put(self, cell: Cell, embedding: np.ndarray, fit_seconds: float, fit_peak_mb: float) -> None:
        """Store an embedding (the ``.npy`` first, its ``.json`` last, both atomically)."""
        npy, meta = self._paths(cache_key(cell))
        write_npy(npy, embedding)
        write_json(
            meta,
            {
                "cell": {
                    "dataset": cell.dataset,
                    "method": cell.method,
                    "use": cell.use,
                    "params": cell.params_text,
                    "seed": cell.seed,
                },
                "fit_seconds": fit_seconds,
                "fit_peak_mb": fit_peak_mb,
                "scores": {},
            },
        )

    def put_result(self, result: CellResult, scoring: Scoring) -> None:
        """Store an ok cell: its embedding if new, and its scores under these scoring settings."""
        cell = result.cell
        _npy, meta = self._paths(cache_key(cell))
        if result.embedding is None:
            return
        if not result.from_cache or not meta.exists():
            self.put(cell, result.embedding, result.fit_seconds, result.fit_peak_mb)
        try:
            info = json.loads(meta.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return
        curve = None if result.curve is None else result.curve.to_dict(orient="list")
        info.setdefault("scores", {})[scoring_digest(scoring)] = {
            "values": result.values,
            "intervals": {k: list(v) for k, v in result.intervals.items()},
            "estimated": list(result.estimated),
            "curve": curve,
            "score_seconds": result.score_seconds,
            "warnings": list(result.warnings),
        }
        write_json(meta, info)

    def get_result(self, cell: Cell, scoring: Scoring) -> CellResult | None:
        """A finished ok result of ``cell`` scored under these settings, or ``None``.

        Nothing runs for such a cell: no fit, no scoring, no child process.
        """
        npy, meta = self._paths(cache_key(cell))
        try:
            info = json.loads(meta.read_text(encoding="utf-8"))
            scored = (info.get("scores") or {}).get(scoring_digest(scoring))
            if scored is None:
                return None
            embedding = np.load(npy, allow_pickle=False)
        except (OSError, ValueError):
            return None
        if embedding.shape[1:] != (cell.dimensions,):
            return None
        intervals = _intervals(scored.get("intervals"))
        if intervals is None or set(scored.get("estimated") or ()) - set(intervals):
            # Written before estimates carried their intervals (or damaged): score again.
            return None
        curve = None if scored.get("curve") is None else pd.DataFrame(scored["curve"])
        return CellResult(
            cell,
            CellStatus.OK,
            embedding=embedding,
            values=_floats(scored["values"]),
            intervals=intervals,
            estimated=tuple(scored.get("estimated") or ()),
            curve=curve,
            fit_seconds=_float(info.get("fit_seconds")),
            fit_peak_mb=_float(info.get("fit_peak_mb")),
            score_seconds=_float(scored.get("score_seconds")),
            from_cache=True,
            warnings=tuple(scored.get("warnings") or ()),
        )

    def info(self) -> dict[str, Any]:
        """Number of entries and bytes used."""
        entries = list(self.root.glob("*/*.json")) if self.root.is_dir() else []
        size = sum(p.stat().st_size for p in self.root.rglob("*") if p.is_file()) if self.root.is_dir() else 0
        return {"path": str(self.root), "entries": len(entries), "bytes": size}

    def clear(self) -> int:
        """Delete every entry; returns how many there were."""
        count = self.info()["entries"]
        if self.root.is_dir():
            for child in self.root.iterdir():
                if child.is_dir() and len(child.name) == 2:
                    shutil.rmtree(child, ignore_errors=True)
        return count
