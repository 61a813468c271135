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
"""

from __future__ import annotations

import json
import logging
from dataclasses import asdict
from datetime import UTC, datetime
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..errors import InputError
from ..suite import Suite, parse_suite
from ..text import exception_line, params_text
from . import atomic
from .cells import CellResult

logger = logging.getLogger(__name__)

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
]
#: What a folder must hold to be read as a run.
_EXPECTED = "expected a run folder made by 'foldbench run' (manifest.json and cells/ or scores.csv)"


def cell_record(result: CellResult) -> dict[str, Any]:
    """The JSON document of a finished cell."""
    c = result.cell
    return {
        "key": c.key,
        "cell": asdict(c),
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
        "warnings": list(result.warnings),
        "finished": datetime.now(UTC).isoformat(timespec="seconds"),
    }


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
        }
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
        if result.embedding is not None:
            atomic.write_npy(self.path / "embeddings" / f"{key}.npy", result.embedding)
        if result.curve is not None:
            atomic.write_csv(self.path / "curves" / f"{key}.csv", result.curve)
        if result.points is not None:
            atomic.write_csv(self.path / "points" / f"{key}.csv", result.points)
        atomic.write_json(self.path / "cells" / f"{key}.json", cell_record(result))
        self._forget()

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

    def records(self) -> list[dict[str, Any]]:
        """All cell records (unreadable or partial files are ignored)."""
        folder = self.path / "cells"
        records = []
        for path in sorted(folder.glob("*.json")) if folder.is_dir() else []:
            try:
                records.append(json.loads(path.read_text(encoding="utf-8")))
            except (OSError, ValueError):
                continue
        return records

    def finished_keys(self) -> set[str]:
        """Keys of the cells already recorded."""
        return {r["key"] for r in self.records()}

    @cached_property
    def scores(self) -> pd.DataFrame:
        """A row per cell, rebuilt from the cell records (or read from ``scores.csv`` when there are none)."""
        records = self.records()
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
            scores = pd.read_csv(csv, dtype={"params": str, "dataset": str, "method": str})
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
        return scores

    def embedding(self, key: str) -> np.ndarray | None:
        """The stored embedding of the cell with this key (``scores['key']``), or ``None``."""
        path = self.path / "embeddings" / f"{key}.npy"
        return np.load(path, allow_pickle=False) if path.exists() else None

    def curve(self, key: str) -> pd.DataFrame | None:
        """The stored co-ranking curve of the cell with this key, or ``None``."""
        path = self.path / "curves" / f"{key}.csv"
        return pd.read_csv(path) if path.exists() else None

    def points(self, key: str) -> pd.DataFrame | None:
        """The per-point table of the cell with this key, or ``None`` when absent or damaged.

        Columns ``point`` (row index into the dataset) and the point's own
        ``trustworthiness@k``, ``continuity@k`` and ``knn_recall@k`` terms; the
        mean of a column is the measure in ``scores.csv``.  A table whose
        indices repeat or whose terms leave [0, 1] is not used (logged).
        """
        path = self.path / "points" / f"{key}.csv"
        if not path.exists():
            return None
        try:
            table = pd.read_csv(path)
            terms = table.drop(columns=["point"]).to_numpy(dtype=np.float64)
            index = table["point"].to_numpy()
        except (OSError, ValueError, KeyError, pd.errors.ParserError) as exc:
            logger.warning("%s: points/%s.csv is unreadable (%s); not used", self.where, key, exc)
            return None
        bad = (
            not np.issubdtype(index.dtype, np.integer)
            or len(np.unique(index)) != len(index)
            or (index.size and index.min() < 0)
            or not np.isfinite(terms).all()
            or (terms.size and (terms.min() < 0 or terms.max() > 1))
        )
        if bad:
            logger.warning("%s: points/%s.csv holds impossible values; not used", self.where, key)
            return None
        return table
