"""Run folders: :class:`RunFolder` is the one type that creates, writes, opens and reads them.

Layout of ``<root>/<suite>/<run id>/``::

    suite.yaml            the suite text as run
    manifest.json         versions, platform, suite hash, dataset fingerprints, times
    cells/<key>.json      one per finished cell (written last: its presence marks the cell done)
    embeddings/<key>.npy  the embedding of an ok cell
    curves/<key>.csv      the co-ranking curve (K, Q_NX, R_NX) of an ok cell
    points/<key>.csv      per-point trustworthiness, continuity and k-NN recall terms of an ok cell
    scores.csv            a row per cell (rebuilt from cells/)
    summary.csv           mean, spread and interval per dataset x method x params, with ranks
    ranking.md            the ranked tables
    report.html, tables.md, tables.tex, figures/   the report (``foldbench report``)

Every write is atomic (:mod:`harness.run.atomic`).  A folder is plain files
that a person can open without the package.

What is read back is verified (:mod:`harness.run.integrity`).  A cell record is
sealed with the SHA-256 of its content and names its key and the digests of its
embedding and curve.  A record filed under another cell's name is ignored with a
warning; a damaged record (or one whose embedding or curve does not match) means
"not done" to ``--resume`` and is a one-line error to readers of scores.  A
``scores.csv`` read in place of records must hold known statuses, one row per
cell and measure values inside their ranges; the manifest's fields must have
their types.
"""

from __future__ import annotations

import hashlib
import io
import json
import logging
import re
from datetime import UTC, datetime
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..config import STORED_STATUSES, CellStatus
from ..errors import InputError
from ..metrics import MEASURES, measure_stem
from ..npyfile import load_npy
from ..suite import Suite, parse_suite
from ..text import exception_line, params_text
from . import atomic
from .cells import Cell, CellResult
from .integrity import (
    FORMAT,
    array_facts,
    array_problem,
    measure_range,
    seal,
    seal_problem,
    value_problem,
    values_problem,
)

log = logging.getLogger(__name__)

ID_COLUMNS = ["dataset", "method", "params", "seed"]
#: Suffixes of the columns holding the bounds of an estimated value's 95% interval.
CI_LOW, CI_HIGH = "_ci_low", "_ci_high"
INFO_COLUMNS = [
    "status",
    "error",
    "fit_seconds",
    "fit_peak_mb",
    "score_seconds",
    "estimated",
    "key",
    "use",
    "from_cache",
    "copy_of",
]
#: What a folder must hold to be read as a run.
_EXPECTED = "expected a run folder made by 'foldbench run' (manifest.json and cells/ or scores.csv)"


def cell_record(result: CellResult) -> dict[str, Any]:
    """The sealed JSON document of a finished cell (with the digests of its embedding and curve)."""
    c = result.cell
    return seal(
        {
            "format": FORMAT,
            "key": c.key,
            "cell": c.as_dict(),
            "status": str(result.status),
            "error": result.error,
            "detail": result.detail,
            "values": result.values,
            "intervals": {k: list(v) for k, v in result.intervals.items()},
            "estimated": list(result.estimated),
            "fit_seconds": result.fit_seconds,
            "fit_peak_mb": result.fit_peak_mb,
            "score_seconds": result.score_seconds,
            "from_cache": result.from_cache,
            "copy_of": result.copy_of,
            "warnings": list(result.warnings),
            "heldout": result.heldout or None,
            "embedding": None if result.embedding is None else array_facts(result.embedding),
            "curve": None if result.curve is None else {"sha256": _text_digest(_curve_text(result.curve))},
            "points": None if result.points is None else {"sha256": _text_digest(_curve_text(result.points))},
            "finished": datetime.now(UTC).isoformat(timespec="seconds"),
        }
    )


def _curve_text(curve: pd.DataFrame) -> str:
    return curve.to_csv(index=False)


def _text_digest(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


_KEY = re.compile(r"[0-9a-f]{16}")
_CELL_FIELDS = {"dataset", "method", "use", "params", "seed", "dimensions", "data_fingerprint"}
_HELDOUT_FIELDS = {"holdout", "out_of_sample"}


def record_problem(doc: Any) -> str | None:
    """Why ``doc`` is not an intact cell record, or ``None``."""
    problem = seal_problem(doc)
    if problem:
        return problem
    cell = doc.get("cell")
    if not isinstance(cell, dict) or not _CELL_FIELDS <= set(cell) <= _CELL_FIELDS | _HELDOUT_FIELDS:
        return "its cell is not a cell"
    if not isinstance(doc.get("key"), str) or not _KEY.fullmatch(doc["key"]):
        return "its key is not a cell key"
    if doc.get("status") not in STORED_STATUSES:
        return f"status {doc.get('status')!r} is not one of {', '.join(sorted(STORED_STATUSES))}"
    for name in ("fit_seconds", "fit_peak_mb", "score_seconds"):
        problem = problem or value_problem(name, doc.get(name))
    return (
        problem
        or values_problem(doc.get("values"))
        or _intervals_problem(doc.get("intervals"))
        or _types_problem(doc)
    )


def _intervals_problem(intervals: Any) -> str | None:
    if intervals is None:
        return None
    if not isinstance(intervals, dict):
        return "its intervals are not an object"
    for name, bounds in intervals.items():
        ok = (
            isinstance(bounds, list)
            and len(bounds) == 2
            and all(isinstance(b, (int, float)) and not isinstance(b, bool) for b in bounds)
            and bounds[0] <= bounds[1]
        )
        if not ok:
            return f"the interval of {name} is not a pair of numbers low <= high"
    return None


def _types_problem(doc: dict[str, Any]) -> str | None:
    expected = {"error": str, "detail": str, "estimated": list, "warnings": list, "from_cache": bool}
    for name, kind in expected.items():
        if not isinstance(doc.get(name), kind):
            return f"{name} is not a {kind.__name__}"
    if not isinstance(doc.get("copy_of", ""), str) or doc.get("copy_of", "") not in ("", *_copy_key(doc)):
        return "copy_of is not the key of another cell"
    for name in ("embedding", "curve", "points", "heldout"):
        if doc.get(name) is not None and not isinstance(doc[name], dict):
            return f"{name} is not an object"
    return None


def _copy_key(doc: dict[str, Any]) -> tuple[str, ...]:
    """``(copy_of,)`` when it is a cell key other than the record's own, else ``()``."""
    source = doc.get("copy_of")
    if isinstance(source, str) and _KEY.fullmatch(source) and source != doc.get("key"):
        return (source,)
    return ()


def scores_frame(records: list[dict[str, Any]], suite: Suite | None = None) -> pd.DataFrame:
    """A row per cell: id columns, status and cost, then one column per measure.

    The 95% interval of an estimated value is in columns ``<measure>_ci_low`` and
    ``<measure>_ci_high`` (Wilson score intervals for measures from sampled query
    points, jackknife intervals for measures from sampled pairs).
    With ``suite``, rows follow its order (dataset, method, grid point, seed),
    which is the order of the plan; cells it does not name come last.
    """
    rows = []
    for r in records:
        c = r["cell"]
        row: dict[str, Any] = {
            "dataset": c["dataset"],
            "method": c["method"],
            "params": params_text(c["params"]),
            "seed": c["seed"],
            "status": r["status"],
            "error": r["error"],
            "fit_seconds": r["fit_seconds"],
            "fit_peak_mb": r["fit_peak_mb"],
            "score_seconds": r["score_seconds"],
            "estimated": ";".join(r.get("estimated", [])),
            "key": r["key"],
            "use": c["use"],
            "from_cache": r.get("from_cache", False),
            "copy_of": r.get("copy_of", ""),
        }
        if r.get("heldout"):
            row["out_of_sample"] = r["heldout"].get("map") or "none"
            row["heldout_reason"] = r["heldout"].get("reason", "")
        row.update(r.get("values") or {})
        for name, (low, high) in (r.get("intervals") or {}).items():
            row[f"{name}{CI_LOW}"], row[f"{name}{CI_HIGH}"] = low, high
        rows.append(row)
    frame = pd.DataFrame(rows, columns=None if rows else ID_COLUMNS + INFO_COLUMNS)
    if suite is not None and len(frame):
        places, keys = _suite_positions(frame, suite), list(frame["key"])
        frame = frame.iloc[sorted(range(len(frame)), key=lambda i: (places[i], keys[i]))]
    measure_cols = [c for c in frame.columns if c not in ID_COLUMNS + INFO_COLUMNS]
    return frame[ID_COLUMNS + INFO_COLUMNS + measure_cols].reset_index(drop=True)


def _suite_positions(frame: pd.DataFrame, suite: Suite) -> list[tuple[int, int, int, int]]:
    """Each row's place in the suite: (dataset, method, grid point, seed), unknown parts last."""
    far = 1 << 30
    datasets = {d.name: i for i, d in enumerate(suite.datasets)}
    methods = {m.name: i for i, m in enumerate(suite.methods)}
    points = {
        m.name: {params_text(sorted(p.items())): j for j, p in enumerate(m.grid_points())}
        for m in suite.methods
    }
    seeds = {s: i for i, s in enumerate(suite.seeds)}
    return [
        (datasets.get(d, far), methods.get(m, far), points.get(m, {}).get(p, far), seeds.get(s, far))
        for d, m, p, s in zip(frame["dataset"], frame["method"], frame["params"], frame["seed"])
    ]


#: Types of the manifest's fields (absent fields pass; an older manifest may lack some).
_MANIFEST_TYPES: dict[str, type | tuple[type, ...]] = {
    "suite": dict,
    "seeds": list,
    "started": str,
    "finished": str,
    "environment": dict,
    "datasets": dict,
    "cells": int,
    "counts": dict,
    "backend": dict,
    "resumed": list,
}
_ENVIRONMENT_TYPES: dict[str, type | tuple[type, ...]] = {
    "packages": dict,
    "blas": list,
    "thread_env": dict,
    "plugins": dict,
    "cpu_count": (int, type(None)),
}


def manifest_problem(manifest: dict[str, Any]) -> str | None:
    """Why a manifest's fields do not have the types 'foldbench run' writes, or ``None``."""
    problem = _fields_problem(manifest, _MANIFEST_TYPES, "")
    if problem:
        return problem
    if not all(isinstance(s, int) and not isinstance(s, bool) for s in manifest.get("seeds") or []):
        return "field seeds: expected a list of integers"
    for name, part in (manifest.get("suite") or {}).items():
        if not isinstance(part, (str, type(None))):
            return f"field suite.{name}: expected text"
    for name, entry in (manifest.get("datasets") or {}).items():
        if not isinstance(entry, dict) or not isinstance(entry.get("fingerprint", ""), (str, type(None))):
            return f"field datasets.{name}: expected an object with a text fingerprint"
    env = manifest.get("environment") or {}
    problem = _fields_problem(env, _ENVIRONMENT_TYPES, "environment.")
    if problem:
        return problem
    if not all(isinstance(lib, dict) for lib in env.get("blas") or []):
        return "field environment.blas: expected a list of objects"
    if not all(isinstance(p, (dict, type(None))) for p in (env.get("plugins") or {}).values()):
        return "field environment.plugins: expected objects"
    return None


def _fields_problem(doc: dict[str, Any], types: dict[str, Any], prefix: str) -> str | None:
    for name, kind in types.items():
        value = doc.get(name)
        if value is not None and (not isinstance(value, kind) or isinstance(value, bool)):
            names = kind.__name__ if isinstance(kind, type) else " or ".join(k.__name__ for k in kind)
            return f"field {prefix}{name}: expected {names}, got {type(value).__name__}"
    return None


class RunFolder:
    """A run folder on disk.

    Make one with :meth:`create` (a new, empty folder) or :meth:`open` (an
    existing run, checked to be one).  Reading properties (``manifest``,
    ``suite``, ``scores``) are read once and kept; every write forgets them.

    Parameters
    ----------
    path : Path
        The folder.
    role : str
        What the folder is to the caller (``run folder``, ``baseline folder``),
        named in messages.
    """

    def __init__(self, path: str | Path, role: str = "run folder") -> None:
        self.path = Path(path)
        self.role = role

    def __repr__(self) -> str:
        return f"RunFolder({str(self.path)!r})"

    # ------------------------------------------------------------ making and opening

    @classmethod
    def create(cls, root: str | Path, suite_name: str) -> RunFolder:
        """Create ``<root>/<suite>/<timestamp>`` (with a suffix if taken).

        The suite name has been checked to be a plain name; this also refuses a
        folder that would land outside ``root``.
        """
        base = Path(root).resolve()
        stamp = datetime.now().strftime("%Y%m%d-%H%M%S")
        parent = (base / suite_name).resolve()
        if parent.parent != base:
            raise InputError(
                "name", f"expected a plain suite name that stays inside {base}, got {suite_name!r}"
            )
        for attempt in range(1000):
            run = parent / (stamp if attempt == 0 else f"{stamp}-{attempt}")
            try:
                run.mkdir(parents=True, exist_ok=False)
                return cls(run)
            except FileExistsError:
                continue
        raise RuntimeError(f"could not create a fresh run folder under {parent}")

    @classmethod
    def open(cls, path: str | Path, role: str = "run folder") -> RunFolder:
        """Open an existing run folder, with a one-line error when it is not one."""
        folder = cls(path, role)
        if not folder.path.is_dir():
            raise InputError(folder.where, f"no such folder; {_EXPECTED}")
        _ = folder.manifest  # read now, so that a broken folder fails here with its reason
        return folder

    @property
    def where(self) -> str:
        """How messages name this folder."""
        return f"{self.role} {self.path}"

    def _forget(self) -> None:
        for name in ("manifest", "suite", "scores"):
            self.__dict__.pop(name, None)

    # ------------------------------------------------------------ writing

    def write_bytes(self, name: str, data: bytes) -> Path:
        """Write a file of the folder (``figures/x.png``) atomically; returns its path."""
        path = self.path / name
        atomic.write_bytes(path, data)
        return path

    def write_text(self, name: str, text: str) -> Path:
        """Write a text file of the folder atomically (UTF-8)."""
        return self.write_bytes(name, text.encode("utf-8"))

    def write_table(self, name: str, frame: pd.DataFrame) -> Path:
        """Write a CSV table of the folder atomically."""
        return self.write_text(name, frame.to_csv(index=False))

    def write_suite(self, text: str) -> None:
        """Keep the suite text as run."""
        self.write_text("suite.yaml", text)
        self._forget()

    def write_manifest(self, manifest: dict[str, Any]) -> None:
        """Write ``manifest.json``."""
        atomic.write_json(self.path / "manifest.json", manifest)
        self._forget()

    def write_cell(self, result: CellResult) -> None:
        """Store one finished cell: embedding and curve first, its JSON record last."""
        key = result.cell.key
        # not flushed one by one: every reader checks them against the record's seal (atomic.py)
        if result.embedding is not None:
            atomic.write_npy(self.path / "embeddings" / f"{key}.npy", result.embedding, durable=False)
        if result.curve is not None:
            atomic.write_csv(self.path / "curves" / f"{key}.csv", result.curve, durable=False)
        if result.points is not None:
            atomic.write_csv(self.path / "points" / f"{key}.csv", result.points, durable=False)
        atomic.write_json(self.path / "cells" / f"{key}.json", cell_record(result), durable=False)
        self._forget()

    def write_copy(self, source: str, cell: Cell) -> CellResult | None:
        """Store ``cell`` as a copy of the finished cell ``source`` (a seed-free fit of another seed).

        The source's record, embedding, curve and per-point table are verified
        first; the copy gets the same files byte for byte and a record of its
        own, sealed like any other, whose ``copy_of`` names ``source``.

        Returns
        -------
        CellResult or None
            What was stored, read back verified, or ``None`` when the source is
            not an intact ok cell (the caller computes the cell instead).
        """
        record = self._record_of(source)
        if record is None or record["status"] != CellStatus.OK:
            return None
        files = {"embedding": ("embeddings", "npy"), "curve": ("curves", "csv"), "points": ("points", "csv")}
        readers = {"embedding": self.embedding, "curve": self.curve, "points": self.points}
        blobs = {}
        for name, (folder, ext) in files.items():
            if record.get(name) is None:
                continue
            if readers[name](source) is None:
                return None
            blobs[f"{folder}/{cell.key}.{ext}"] = (self.path / folder / f"{source}.{ext}").read_bytes()
        for name, data in blobs.items():
            atomic.write_bytes(self.path / name, data, durable=False)
        doc = {k: v for k, v in record.items() if k != "sha256"}
        doc.update(key=cell.key, cell=cell.as_dict(), copy_of=source)
        doc["finished"] = datetime.now(UTC).isoformat(timespec="seconds")
        atomic.write_json(self.path / "cells" / f"{cell.key}.json", seal(doc), durable=False)
        self._forget()
        return CellResult(
            cell,
            CellStatus(record["status"]),
            record["error"],
            record["detail"],
            embedding=self.embedding(cell.key),
            values=dict(record["values"]),
            intervals={k: (float(v[0]), float(v[1])) for k, v in (record.get("intervals") or {}).items()},
            estimated=tuple(record["estimated"]),
            curve=self.curve(cell.key),
            points=self.points(cell.key),
            fit_seconds=record["fit_seconds"],
            fit_peak_mb=record["fit_peak_mb"],
            score_seconds=record["score_seconds"],
            from_cache=record["from_cache"],
            copy_of=source,
            warnings=tuple(record["warnings"]),
        )

    # ------------------------------------------------------------ reading

    @cached_property
    def manifest(self) -> dict[str, Any]:
        """``manifest.json``."""
        path = self.path / "manifest.json"
        try:
            manifest = json.loads(path.read_text(encoding="utf-8"))
        except FileNotFoundError:
            raise InputError(self.where, f"no manifest.json; {_EXPECTED}") from None
        except (OSError, ValueError) as exc:
            raise InputError(
                f"{self.where}/manifest.json", f"expected readable JSON ({exception_line(exc, 200)})"
            ) from None
        if not isinstance(manifest, dict):
            raise InputError(
                f"{self.where}/manifest.json", "expected a JSON object: the manifest of 'foldbench run'"
            )
        problem = manifest_problem(manifest)
        if problem:
            raise InputError(
                f"{self.where}/manifest.json", f"expected the manifest of 'foldbench run'; {problem}"
            )
        return manifest

    @property
    def has_suite(self) -> bool:
        """The folder keeps the suite text it was run from."""
        return (self.path / "suite.yaml").is_file()

    @cached_property
    def suite(self) -> Suite:
        """The suite as it was run (plug-ins are not imported to read it)."""
        path = self.path / "suite.yaml"
        try:
            text = path.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError):
            raise InputError(self.where, f"no readable suite.yaml; {_EXPECTED}") from None
        recorded = (self.manifest.get("suite") or {}).get("path") or str(path)
        return parse_suite(text, str(recorded), resolve_plugins=False)

    def _read_records(self) -> tuple[list[dict[str, Any]], list[tuple[Path, str]]]:
        """Intact records, and damaged record files with the reason; misfiled copies are left out."""
        folder = self.path / "cells"
        good, damaged = [], []
        for path in sorted(folder.glob("*.json")) if folder.is_dir() else []:
            try:
                doc = json.loads(path.read_text(encoding="utf-8"))
            except (OSError, ValueError) as exc:
                damaged.append((path, f"not readable JSON ({type(exc).__name__})"))
                continue
            key = doc.get("key") if isinstance(doc, dict) else None
            if isinstance(key, str) and key != path.stem:
                self._warn(path, f"it holds the record of cell {key}, not of {path.stem}; ignored")
                continue
            problem = record_problem(doc) or (None if _KEY.fullmatch(path.stem) else "not a cell key")
            if problem:
                damaged.append((path, problem))
            else:
                good.append(doc)
        return good, damaged

    def _warn(self, path: Path, message: str) -> None:
        told = self.__dict__.setdefault("_told", set())
        if path not in told:
            told.add(path)
            log.warning("%s/cells/%s: %s", self.where, path.name, message)

    def records(self) -> list[dict[str, Any]]:
        """The intact cell records; damaged or misfiled ones are left out with a warning."""
        good, damaged = self._read_records()
        for path, problem in damaged:
            self._warn(path, f"not an intact cell record ({problem}); the cell counts as not done")
        return good

    def finished_keys(self) -> set[str]:
        """Keys of the cells whose record, embedding and curve are intact (what ``--resume`` skips)."""
        done = set()
        for record in self.records():
            try:
                self._verified_files(record)
            except InputError as err:
                self._warn(
                    self.path / "cells" / f"{record['key']}.json", f"{err.expected}; computing it again"
                )
                continue
            done.add(record["key"])
        return done

    def _verified_files(self, record: dict[str, Any]) -> None:
        key = record["key"]
        if record.get("embedding") is not None and self.embedding(key) is None:
            raise InputError(self.where, f"embeddings/{key}.npy is missing")
        if record.get("curve") is not None and self.curve(key) is None:
            raise InputError(self.where, f"curves/{key}.csv is missing")

    @cached_property
    def scores(self) -> pd.DataFrame:
        """A row per cell, rebuilt from the cell records (or read from ``scores.csv`` when there are none)."""
        records, damaged = self._read_records()
        if damaged:
            path, problem = damaged[0]
            more = f" (and {len(damaged) - 1} more)" if len(damaged) > 1 else ""
            raise InputError(
                f"{self.where}/cells/{path.name}",
                f"expected an intact cell record ({problem}){more}; delete it, or run the suite "
                f"again with --resume {self.path} to compute it again",
            )
        if records:
            try:
                return scores_frame(records, self.suite if self.has_suite else None)
            except (KeyError, TypeError, ValueError) as exc:
                raise InputError(
                    self.where, f"cells/*.json are not cell records ({exception_line(exc, 200)})"
                ) from None
        return self._scores_csv()

    def _scores_csv(self) -> pd.DataFrame:
        csv = self.path / "scores.csv"
        if not csv.exists():
            raise InputError(
                self.where, "no finished cells (cells/*.json) and no scores.csv; expected a finished run"
            )
        try:
            scores = pd.read_csv(
                csv,
                dtype={"params": str, "dataset": str, "method": str, "status": str},
                keep_default_na=False,
                na_values=[""],
            )
        except (OSError, ValueError, pd.errors.ParserError) as exc:
            raise InputError(
                f"{self.where}/scores.csv", f"expected a readable CSV table ({exception_line(exc, 200)})"
            ) from None
        needed = (*ID_COLUMNS, "status")
        missing = [c for c in needed if c not in scores]
        if missing:
            raise InputError(
                f"{self.where}/scores.csv",
                f"expected columns {', '.join(needed)}; missing {', '.join(missing)}",
            )
        return _checked_scores(scores, f"{self.where}/scores.csv")

    def _record_of(self, key: str) -> dict[str, Any] | None:
        """The intact record of the cell with this key, or ``None``."""
        path = self.path / "cells" / f"{key}.json"
        try:
            doc = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return None
        return doc if record_problem(doc) is None and doc.get("key") == key else None

    def embedding(self, key: str) -> np.ndarray | None:
        """The verified embedding of the cell with this key (``scores['key']``), or ``None``.

        ``None`` when the cell has no intact record naming an embedding.

        Raises
        ------
        InputError
            When the file does not match the digest and shape its record names.
        """
        record = self._record_of(key)
        path = self.path / "embeddings" / f"{key}.npy"
        if record is None or record.get("embedding") is None or not path.exists():
            return None
        try:
            array = load_npy(path)
        except (OSError, ValueError, EOFError) as exc:
            raise InputError(
                f"{self.where}/embeddings/{path.name}", f"expected a .npy array ({exc})"
            ) from None
        problem = array_problem(array, record["embedding"])
        if problem:
            raise InputError(
                f"{self.where}/embeddings/{path.name}",
                f"expected the embedding its cell record names ({problem})",
            )
        return array

    def curve(self, key: str) -> pd.DataFrame | None:
        """The verified co-ranking curve of the cell with this key, or ``None``.

        Raises
        ------
        InputError
            When the file does not match the digest its record names.
        """
        record = self._record_of(key)
        path = self.path / "curves" / f"{key}.csv"
        if record is None or record.get("curve") is None or not path.exists():
            return None
        try:
            text = path.read_bytes().decode("utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise InputError(f"{self.where}/curves/{path.name}", f"expected a CSV table ({exc})") from None
        if _text_digest(text) != record["curve"].get("sha256"):
            raise InputError(
                f"{self.where}/curves/{path.name}",
                "expected the curve its cell record names (SHA-256 differs)",
            )
        return pd.read_csv(io.StringIO(text))

    def points(self, key: str) -> pd.DataFrame | None:
        """The per-point table of the cell with this key, or ``None`` when absent or damaged.

        Columns ``point`` (row index into the dataset) and the point's own
        ``trustworthiness@k``, ``continuity@k`` and ``knn_recall@k`` terms; the
        mean of a column is the measure in ``scores.csv``.  A table that is not
        the one its cell record names, or whose indices repeat or terms leave
        [0, 1], is not used (logged).
        """
        record = self._record_of(key)
        path = self.path / "points" / f"{key}.csv"
        if record is None or record.get("points") is None or not path.exists():
            return None
        try:
            text = path.read_bytes().decode("utf-8")
            if _text_digest(text) != record["points"].get("sha256"):
                log.warning("%s: points/%s.csv is not the table its record names; not used", self.where, key)
                return None
            table = pd.read_csv(io.StringIO(text))
            terms = table.drop(columns=["point"]).to_numpy(dtype=np.float64)
            index = table["point"].to_numpy()
        except (OSError, UnicodeDecodeError, ValueError, KeyError, pd.errors.ParserError) as exc:
            log.warning("%s: points/%s.csv is unreadable (%s); not used", self.where, key, exc)
            return None
        bad = (
            not np.issubdtype(index.dtype, np.integer)
            or len(np.unique(index)) != len(index)
            or (index.size and index.min() < 0)
            or not np.isfinite(terms).all()
            or (terms.size and (terms.min() < 0 or terms.max() > 1))
        )
        if bad:
            log.warning("%s: points/%s.csv holds impossible values; not used", self.where, key)
            return None
        return table


def _checked_scores(scores: pd.DataFrame, where: str) -> pd.DataFrame:
    """A ``scores.csv`` table after checks: rows, statuses, one row per cell, numbers in range."""
    if not len(scores):
        raise InputError(where, "expected a row per cell; the table holds no rows")
    bad = ~scores["status"].isin(STORED_STATUSES)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(
            where,
            f"line {i + 2}: expected status {', '.join(sorted(STORED_STATUSES))}, "
            f"got {scores['status'].iloc[i]!r}",
        )
    dup = scores.duplicated(ID_COLUMNS, keep="first")
    if dup.any():
        i = int(np.flatnonzero(dup)[0])
        cell = ", ".join(f"{c}={scores[c].iloc[i]}" for c in ID_COLUMNS)
        raise InputError(where, f"line {i + 2}: expected one row per cell; {cell} is there twice")
    columns = ["seed", "fit_seconds", "fit_peak_mb", "score_seconds"]
    known = [
        c for c in scores.columns if measure_stem(c.removesuffix(CI_LOW).removesuffix(CI_HIGH)) in MEASURES
    ]
    columns += [c for c in known if c not in ID_COLUMNS + INFO_COLUMNS]
    for column in [c for c in columns if c in scores]:
        scores[column] = _checked_column(scores[column], column, where)
    return scores


def _checked_column(raw: pd.Series, column: str, where: str) -> pd.Series:
    numbers = pd.to_numeric(raw, errors="coerce")
    values = numbers.to_numpy(dtype=float)
    low, high = measure_range(column)
    bad = raw.notna().to_numpy() & ~(np.isfinite(values) & (values >= low - 1e-9) & (values <= high + 1e-9))
    if column == "seed":
        bad |= np.isfinite(values) & (values != np.round(values))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        text = raw.iloc[i]
        problem = value_problem(column, float(values[i])) if np.isfinite(values[i]) else None
        raise InputError(
            where,
            f"line {i + 2}: expected {'an integer' if column == 'seed' else 'a finite number in range'} "
            f"in column {column}; {problem or f'got {text!r}'}",
        )
    return numbers.astype("int64") if column == "seed" and numbers.notna().all() else numbers
