"""Run folders: the only module that writes files.

Layout of ``<root>/<suite>/<run id>/``::

    suite.yaml            the suite text as run
    manifest.json         versions, platform, suite hash, dataset fingerprints, times
    cells/<key>.json      one per finished cell (written last: its presence marks the cell done)
    embeddings/<key>.npy  the embedding of an ok cell
    curves/<key>.csv      the co-ranking curve (K, Q_NX, R_NX) of an ok cell
    scores.csv            a row per cell (rebuilt from cells/)
    summary.csv           mean and sd per dataset x method x params, with ranks
    ranking.md            the ranked tables

Every write goes to a temporary name in the same folder, is flushed to disk and
then renamed, so a half-written file never counts.
"""
from __future__ import annotations

import io
import json
import math
import os
import tempfile
from dataclasses import asdict
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .cells import Cell, CellResult
from .errors import InputError

ID_COLUMNS = ["dataset", "method", "params", "seed"]
INFO_COLUMNS = ["status", "error", "fit_seconds", "fit_peak_mb", "score_seconds", "estimated",
                "key", "use", "from_cache"]


# ---------------------------------------------------------------- atomic writes

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


def write_bytes(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically (temporary name, fsync, rename)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        os.fchmod(fd, 0o666 & ~_UMASK)  # mkstemp makes files private; results are meant to be shared
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    _fsync_dir(path.parent)


def write_text(path: Path, text: str) -> None:
    """Write text atomically (UTF-8)."""
    write_bytes(path, text.encode("utf-8"))


def write_json(path: Path, obj: Any) -> None:
    """Write JSON atomically; NaN and infinity become ``null``."""
    write_text(path, json.dumps(_jsonable(obj), indent=2, sort_keys=False) + "\n")


def write_npy(path: Path, array: np.ndarray) -> None:
    """Save an array as ``.npy`` atomically."""
    buf = io.BytesIO()
    np.save(buf, np.asarray(array), allow_pickle=False)
    write_bytes(path, buf.getvalue())


def write_csv(path: Path, frame: pd.DataFrame) -> None:
    """Save a DataFrame as CSV atomically."""
    write_text(path, frame.to_csv(index=False))


def _jsonable(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, (np.floating, float)):
        return None if not math.isfinite(float(obj)) else float(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


# ---------------------------------------------------------------- run folders

def new_run_dir(root: str | Path, suite_name: str) -> Path:
    """Create ``<root>/<suite>/<timestamp>`` (with a suffix if taken) and return it.

    The suite name has been checked to be a plain name; this also refuses any
    result that would land outside ``root``.
    """
    root = Path(root).resolve()
    stamp = datetime.now().strftime("%Y%m%d-%H%M%S")
    parent = (root / suite_name).resolve()
    if parent.parent != root:
        raise InputError("name", f"expected a plain suite name that stays inside {root}, got {suite_name!r}")
    for attempt in range(1000):
        run = parent / (stamp if attempt == 0 else f"{stamp}-{attempt}")
        try:
            run.mkdir(parents=True, exist_ok=False)
            return run
        except FileExistsError:
            continue
    raise RuntimeError(f"could not create a fresh run folder under {parent}")


def cell_record(result: CellResult) -> dict[str, Any]:
    """The JSON document of a finished cell."""
    c = result.cell
    return {
        "key": c.key,
        "cell": asdict(c),
        "status": result.status,
        "error": result.error,
        "detail": result.detail,
        "values": result.values,
        "halfwidths": result.halfwidths,
        "estimated": list(result.estimated),
        "fit_seconds": result.fit_seconds,
        "fit_peak_mb": result.fit_peak_mb,
        "score_seconds": result.score_seconds,
        "from_cache": result.from_cache,
        "warnings": list(result.warnings),
        "finished": datetime.now(timezone.utc).isoformat(timespec="seconds"),
    }


def write_cell(run_dir: Path, result: CellResult) -> None:
    """Store one finished cell: embedding and curve first, its JSON record last."""
    key = result.cell.key
    if result.embedding is not None:
        write_npy(run_dir / "embeddings" / f"{key}.npy", result.embedding)
    if result.curve is not None:
        write_csv(run_dir / "curves" / f"{key}.csv", result.curve)
    write_json(run_dir / "cells" / f"{key}.json", cell_record(result))


def read_cell_records(run_dir: Path) -> list[dict[str, Any]]:
    """All cell records of a run folder (unreadable or partial files are ignored)."""
    records = []
    folder = Path(run_dir) / "cells"
    if not folder.is_dir():
        return records
    for path in sorted(folder.glob("*.json")):
        try:
            records.append(json.loads(path.read_text(encoding="utf-8")))
        except (OSError, ValueError):
            continue
    return records


def finished_keys(run_dir: Path) -> set[str]:
    """Keys of the cells already recorded in a run folder."""
    return {r["key"] for r in read_cell_records(run_dir)}


def scores_frame(records: list[dict[str, Any]], order: list[Cell] | None = None) -> pd.DataFrame:
    """A row per cell: id columns, status and cost, then one column per measure.

    Half-widths of 95% intervals of estimated values are columns ``<measure>_ci95``.
    """
    rows = []
    for r in records:
        c = r["cell"]
        params = ",".join(f"{k}={_fmt(v)}" for k, v in c["params"]) or "-"
        row: dict[str, Any] = {"dataset": c["dataset"], "method": c["method"], "params": params,
                               "seed": c["seed"], "status": r["status"], "error": r["error"],
                               "fit_seconds": r["fit_seconds"], "fit_peak_mb": r["fit_peak_mb"],
                               "score_seconds": r["score_seconds"],
                               "estimated": ";".join(r.get("estimated", [])),
                               "key": r["key"], "use": c["use"], "from_cache": r.get("from_cache", False)}
        for name, value in (r.get("values") or {}).items():
            row[name] = value
        for name, value in (r.get("halfwidths") or {}).items():
            row[f"{name}_ci95"] = value
        rows.append(row)
    frame = pd.DataFrame(rows, columns=None if rows else ID_COLUMNS + INFO_COLUMNS)
    if order is not None and len(frame):
        rank = {c.key: i for i, c in enumerate(order)}
        frame = frame.assign(_o=frame["key"].map(rank).fillna(len(rank))).sort_values(
            ["_o", "key"], kind="stable").drop(columns="_o")
    measure_cols = [c for c in frame.columns if c not in ID_COLUMNS + INFO_COLUMNS]
    return frame[ID_COLUMNS + INFO_COLUMNS + measure_cols].reset_index(drop=True)


def _fmt(value: Any) -> str:
    return f"{value:g}" if isinstance(value, float) else str(value)


def write_manifest(run_dir: Path, manifest: dict[str, Any]) -> None:
    """Write ``manifest.json``."""
    write_json(Path(run_dir) / "manifest.json", manifest)


def read_manifest(run_dir: Path) -> dict[str, Any]:
    """Read ``manifest.json`` of a run folder, with a one-line error when it is missing or broken."""
    path = Path(run_dir) / "manifest.json"
    if not Path(run_dir).is_dir():
        raise InputError(str(run_dir), "no such folder: expected a run folder made by 'foldbench run'")
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(str(path), "missing: expected a run folder made by 'foldbench run'") from None
    except (OSError, ValueError) as exc:
        raise InputError(str(path), f"expected a readable JSON manifest ({exc})") from None


def load_scores(run_dir: Path) -> pd.DataFrame:
    """The scores of a run folder, rebuilt from its cell records."""
    records = read_cell_records(Path(run_dir))
    if not records:
        raise InputError(str(Path(run_dir) / "cells"), "expected finished cells, found none")
    return scores_frame(records)


def load_embedding(run_dir: Path, key: str) -> np.ndarray | None:
    """The stored embedding of a cell, or ``None``."""
    path = Path(run_dir) / "embeddings" / f"{key}.npy"
    return np.load(path) if path.exists() else None


def load_curve(run_dir: Path, key: str) -> pd.DataFrame | None:
    """The stored co-ranking curve of a cell, or ``None``."""
    path = Path(run_dir) / "curves" / f"{key}.csv"
    return pd.read_csv(path) if path.exists() else None
