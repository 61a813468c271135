"""A content-addressed cache of fitted embeddings, shared across runs and suites.

An entry is named by a hash of everything that decides the embedding: the
dataset's fingerprint, the method (for a plug-in also its package version and
the bytes of its module file), its parameters, the output dimension, the seed,
and the versions of the libraries that compute it.  Change any of them and the
entry is simply not found.  Each entry also keeps the scores of its embedding
under every scoring setting it was scored with, so a finished cell run again
with the same settings costs neither a fit nor a score.  Only the parent process
writes entries (atomically); children only read.

Nothing is served unverified.  An entry's JSON is sealed with the SHA-256 of its
content (:mod:`harness.run.integrity`) and names the key it was written for and
the digest, shape and dtype of its embedding; an entry whose seal, key, digest or
shape does not match, whose embedding is not finite, or whose scores leave their
measure's range counts as not cached: the cell is fitted again and the entry
rewritten, and the log says so once per entry.  The cache root carries a
``CACHEDIR.TAG`` written when it is made; ``clear`` refuses a folder without one
and deletes only files named like entries.
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import logging
import re
from dataclasses import asdict, dataclass, field
from functools import cache, lru_cache
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import platformdirs

from ..config import CellStatus, Scoring
from ..errors import InputError
from ..methods import METHODS
from ..npyfile import load_npy
from .atomic import write_json, write_npy, write_text
from .cells import Cell, CellResult, KnownFit
from .integrity import FORMAT, array_facts, array_problem, seal, seal_problem, value_problem, values_problem
from .manifest import package_versions

log = logging.getLogger(__name__)

#: Libraries whose version can change a fitted embedding.
_RESULT_PACKAGES = ("foldbench", "numpy", "scipy", "scikit-learn")

#: The marker file of a cache root (the Cache Directory Tagging convention, so backups skip it).
MARKER = "CACHEDIR.TAG"
_MARKER_TEXT = (
    "Signature: 8a477f597d28d172789f06886806bc55\n"
    f"# foldbench embedding cache, format {FORMAT}; 'foldbench cache clear' empties it.\n"
)
_MARKER_WORDS = "# foldbench embedding cache"
#: Names of an entry's files and of the temporary files of their atomic writes.
_ENTRY_DIR = re.compile(r"[0-9a-f]{2}")
_ENTRY_FILE = re.compile(r"\.?(?P<key>[0-9a-f]{32})\.(?:npy|json)(?:\..*\.part)?")


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
        doc["content"] = spec.content_identity(cell.params_dict(), cell.seed)
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
    # Where the measures ran does not change them (harness.metrics._cluster), so it is no part of the name.
    settings = {k: v for k, v in asdict(scoring).items() if k not in Scoring.PLACEMENT}
    doc = {"scoring": settings, "libraries": _library_versions()}
    return hashlib.sha256(json.dumps(doc, sort_keys=True, default=str).encode()).hexdigest()[:16]


def _cost(value: Any) -> float:
    """A recorded cost (seconds, MiB): ``null`` is NaN; anything but a number >= 0 raises."""
    if value is None:
        return float("nan")
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not value >= 0:
        raise ValueError(f"expected a cost >= 0, got {value!r}")
    return float(value)


def _scored_problem(scored: Any) -> str | None:
    """Why a cached score document cannot be served, or ``None``."""
    if not isinstance(scored, dict):
        return "its scores are not an object"
    if not isinstance(scored.get("values"), dict) or not scored["values"]:
        return "it has no measure values"
    return (
        values_problem(scored["values"])
        or (None if _intervals(scored.get("intervals")) is not None else "its intervals are damaged")
        or value_problem("score_seconds", scored.get("score_seconds"))
    )


def _float(value: Any) -> float:
    return float("nan") if value is None else float(value)


def _points(table: Any) -> pd.DataFrame | None:
    """A cached per-point table read back, or ``None`` when missing or not of the stored shape."""
    if not isinstance(table, dict) or "point" not in table:
        return None
    try:
        frame = pd.DataFrame(table)
        terms = frame.drop(columns=["point"]).to_numpy(dtype=np.float64)
        index = frame["point"].to_numpy(dtype=np.int64)
    except (TypeError, ValueError):
        return None
    if len(np.unique(index)) != len(index) or not np.isfinite(terms).all():
        return None
    if terms.size and (terms.min() < 0 or terms.max() > 1):
        return None
    return frame


def _intervals(values: Any) -> dict[str, tuple[float, float]] | None:
    """``{measure: (low, high)}`` read back, or ``None`` when missing or not of that shape."""
    if not isinstance(values, dict):
        return None
    out = {}
    for k, v in values.items():
        if not isinstance(v, list) or len(v) != 2:
            return None
        low, high = _float(v[0]), _float(v[1])
        if not (np.isfinite(low) and np.isfinite(high) and low <= high):
            return None
        out[str(k)] = (low, high)
    return out


@dataclass(frozen=True)
class EmbeddingCache:
    """The cache folder: ``<root>/CACHEDIR.TAG`` and ``<root>/<2 hex>/<key>.npy`` plus ``<key>.json``.

    Parameters
    ----------
    root : Path
        Folder of the cache (created, with its marker, on first write).
    """

    root: Path
    _told: set[str] = field(default_factory=set, compare=False, repr=False)

    def _paths(self, key: str) -> tuple[Path, Path]:
        folder = self.root / key[:2]
        return folder / f"{key}.npy", folder / f"{key}.json"

    def _once(self, key: str, message: str, *args: Any) -> None:
        """Log a warning about an entry the first time only."""
        if key not in self._told:
            self._told.add(key)
            log.warning(message, *args)

    def _entry(self, cell: Cell, rows: int | None) -> tuple[dict[str, Any], np.ndarray] | None:
        """The verified entry of ``cell``: its JSON and its embedding; ``None`` when absent or bad."""
        if cell.holdout is not None:
            return None  # a fit on part of the data, with held-out scores the cache does not keep
        key = cache_key(cell)
        npy, meta = self._paths(key)
        if not meta.exists():
            return None
        try:
            info = json.loads(meta.read_text(encoding="utf-8"))
            problem = seal_problem(info)
            if problem is None and info.get("key") != key:
                problem = f"it was written for key {info.get('key')!r}"
            embedding = None if problem else load_npy(npy)
            if problem is None:
                problem = array_problem(embedding, info.get("embedding"), rows, cell.dimensions)
            if problem is None:
                _cost(info.get("fit_seconds")), _cost(info.get("fit_peak_mb"))
        except (OSError, ValueError, TypeError, AttributeError, EOFError) as exc:
            problem = f"it cannot be read ({type(exc).__name__})"
        if problem or embedding is None:
            self._once(key, "cache entry %s of %s is not used (%s); fitting again", meta, cell.key, problem)
            return None
        return info, embedding

    def get(self, cell: Cell, rows: int | None = None) -> KnownFit | None:
        """The verified cached embedding of ``cell`` (``rows`` points when given), or ``None``."""
        found = self._entry(cell, rows)
        if found is None:
            return None
        info, embedding = found
        return KnownFit(embedding, _cost(info.get("fit_seconds")), _cost(info.get("fit_peak_mb")))

    def _ensure_root(self) -> bool:
        """Make the root with its marker, or adopt a root holding only entries; ``False`` to not write."""
        marker = self.root / MARKER
        if self.is_marked():
            return True
        if self.root.is_dir() and any(not self._is_entry_path(p) for p in self.root.iterdir()):
            self._once(
                "<root>",
                "not writing to the cache %s: it has no %s of a foldbench cache and holds other files",
                self.root,
                MARKER,
            )
            return False
        write_text(marker, _MARKER_TEXT)
        return True

    def is_marked(self) -> bool:
        """The root carries the marker a foldbench cache is made with."""
        try:
            return _MARKER_WORDS in (self.root / MARKER).read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError):
            return False

    @staticmethod
    def _is_entry_path(path: Path) -> bool:
        if not (path.is_dir() and _ENTRY_DIR.fullmatch(path.name)):
            return False
        return all(_entry_file_of(f, path.name) for f in path.iterdir())

    def put(self, cell: Cell, embedding: np.ndarray, fit_seconds: float, fit_peak_mb: float) -> None:
        """Store an embedding (the ``.npy`` first, its sealed ``.json`` last, both atomically)."""
        if not self._ensure_root():
            return
        key = cache_key(cell)
        npy, meta = self._paths(key)
        # not flushed one by one: an entry is used only when it verifies against its seal (atomic.py)
        write_npy(npy, embedding, durable=False)
        write_json(meta, self._document(cell, embedding, fit_seconds, fit_peak_mb, {}), durable=False)

    @staticmethod
    def _document(
        cell: Cell, embedding: np.ndarray, fit_seconds: float, fit_peak_mb: float, scores: dict[str, Any]
    ) -> dict[str, Any]:
        return seal(
            {
                "format": FORMAT,
                "key": cache_key(cell),
                "cell": {
                    "dataset": cell.dataset,
                    "method": cell.method,
                    "use": cell.use,
                    "params": cell.params_text,
                    "seed": cell.seed,
                },
                "embedding": array_facts(np.asarray(embedding)),
                "fit_seconds": fit_seconds,
                "fit_peak_mb": fit_peak_mb,
                "scores": scores,
            }
        )

    def put_result(self, result: CellResult, scoring: Scoring) -> None:
        """Store an ok cell: its embedding if new, and its scores under these scoring settings."""
        cell = result.cell
        if result.embedding is None or cell.holdout is not None or not self._ensure_root():
            return
        found = self._entry(cell, None) if result.from_cache else None
        npy, meta = self._paths(cache_key(cell))
        if found is None:  # a new entry: its array now, its sealed document (with the scores) below
            write_npy(npy, result.embedding, durable=False)
            scores: dict[str, Any] = {}
        else:
            scores = dict(found[0].get("scores") or {})
        curve = None if result.curve is None else result.curve.to_dict(orient="list")
        scores[scoring_digest(scoring)] = {
            "values": result.values,
            "intervals": {k: list(v) for k, v in result.intervals.items()},
            "estimated": list(result.estimated),
            "curve": curve,
            "points": None if result.points is None else result.points.to_dict(orient="list"),
            "score_seconds": result.score_seconds,
            "warnings": list(result.warnings),
        }
        write_json(
            meta,
            self._document(cell, result.embedding, result.fit_seconds, result.fit_peak_mb, scores),
            durable=False,
        )

    def get_result(self, cell: Cell, scoring: Scoring, rows: int | None = None) -> CellResult | None:
        """A verified finished ok result of ``cell`` scored under these settings, or ``None``.

        Nothing runs for such a cell: no fit, no scoring, no child process.
        """
        found = self._entry(cell, rows)
        if found is None:
            return None
        info, embedding = found
        scored = (info.get("scores") or {}).get(scoring_digest(scoring))
        if scored is None:
            return None
        problem = _scored_problem(scored)
        try:
            curve = None if scored.get("curve") is None else pd.DataFrame(scored["curve"])
        except (TypeError, ValueError) as exc:
            problem = problem or f"its curve cannot be read ({type(exc).__name__})"
        if problem:
            self._once(
                cache_key(cell), "cached scores of %s are not used (%s); scoring again", cell.key, problem
            )
            return None
        if embedding.shape[1:] != (cell.dimensions,):
            return None
        intervals = _intervals(scored.get("intervals")) or {}
        if set(scored.get("estimated") or ()) - set(intervals):
            # Written before estimates carried their intervals: score again.
            return None
        points = _points(scored.get("points"))
        if points is None:
            # Written before cells kept their per-point terms, or damaged: score again.
            return None
        return CellResult(
            cell,
            CellStatus.OK,
            embedding=embedding,
            values={k: _float(v) for k, v in scored["values"].items()},
            intervals=intervals,
            estimated=tuple(str(e) for e in scored.get("estimated") or ()),
            points=points,
            curve=curve,
            fit_seconds=_cost(info.get("fit_seconds")),
            fit_peak_mb=_cost(info.get("fit_peak_mb")),
            score_seconds=_float(scored.get("score_seconds")),
            from_cache=True,
            warnings=tuple(str(w) for w in scored.get("warnings") or ()),
        )

    def _entry_files(self) -> list[Path]:
        if not self.root.is_dir():
            return []
        return [
            f
            for d in self.root.iterdir()
            if d.is_dir() and _ENTRY_DIR.fullmatch(d.name)
            for f in d.iterdir()
            if _entry_file_of(f, d.name)
        ]

    def info(self) -> dict[str, Any]:
        """Number of entries and bytes used (files named like entries only)."""
        files = self._entry_files()
        entries = sum(1 for f in files if f.name.endswith(".json"))
        return {"path": str(self.root), "entries": entries, "bytes": sum(f.stat().st_size for f in files)}

    def clear(self) -> int:
        """Delete every entry; returns how many there were.

        Raises
        ------
        InputError
            When the folder exists but is not a foldbench cache (no marker); nothing is deleted.
        """
        if not self.root.exists():
            return 0
        if not self.is_marked():
            raise InputError(
                f"cache folder {self.root}",
                f"expected a foldbench cache (it has no {MARKER} written when foldbench made it); "
                "nothing deleted",
            )
        files = self._entry_files()
        count = sum(1 for f in files if f.name.endswith(".json"))
        for f in files:
            f.unlink(missing_ok=True)
        for d in {f.parent for f in files}:
            try:
                d.rmdir()
            except OSError:
                log.warning("kept %s: it holds files that are not cache entries", d)
        return count


def _entry_file_of(path: Path, folder: str) -> bool:
    """``path`` is a file named like an entry (or its temporary file) of the entry folder ``folder``."""
    match = _ENTRY_FILE.fullmatch(path.name)
    return bool(match and match["key"].startswith(folder) and path.is_file())
