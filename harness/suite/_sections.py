"""The sections of a suite document, each validated into plain values."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from ..config import (
    BACKEND_NAMES,
    MAX_CELLS,
    MAX_GRID_POINTS,
    MAX_SEED,
    MAX_SEEDS,
    MEASURE_BACKENDS,
    RunSettings,
    Scoring,
)
from ..datasets import get_dataset_spec
from ..errors import InputError, suggest
from ..methods import OUT_OF_SAMPLE_MAPS, MethodSpec, get_method_spec
from ..params import validate_params
from ..text import show
from ._read import integer, listed, mapping, measure_key, no_unknown, parse_size, plain_name, unique_names
from .model import DatasetEntry, MethodEntry

_PATH_PARAMS = ("path", "labels_path")
_DATASET_KEYS = ("use", "name", "params", "holdout")
_METHOD_KEYS = ("use", "name", "params", "grid", "out_of_sample")
_SCORING_KEYS = (
    "k",
    "rank_by",
    "pair_sample_above",
    "pairs",
    "estimate_above",
    "queries",
    "memory",
    "seed",
    "backend",
)
_RUN_KEYS = ("jobs", "time_limit", "quadratic_limit", "backend", "scheduler")


def seeds(raw: Any, where: str) -> tuple[int, ...]:
    """A count (``3`` means 0, 1, 2) or a list of distinct seeds; default three."""
    if raw is None:
        return (0, 1, 2)
    if isinstance(raw, int) and not isinstance(raw, bool):
        count = integer(raw, where, low=1)
        if count > MAX_SEEDS:
            raise InputError(where, f"expected at most {MAX_SEEDS} seeds, got {count}")
        return tuple(range(count))
    raw = listed(raw, where, "seeds")
    if len(raw) > MAX_SEEDS:
        raise InputError(where, f"expected at most {MAX_SEEDS} seeds, got a list of {len(raw)}")
    out = tuple(integer(v, f"{where}[{i}]", low=0) for i, v in enumerate(raw))
    for i, seed in enumerate(out):
        if seed > MAX_SEED:
            raise InputError(
                f"{where}[{i}]",
                f"expected a seed from 0 to 2**32 - 1 = {MAX_SEED} (NumPy's range), got {seed}",
            )
    if not out:
        raise InputError(where, "expected at least one seed")
    if len(set(out)) != len(out):
        raise InputError(where, f"expected distinct seeds, got {list(out)}")
    return out


def cell_count(
    datasets: tuple[DatasetEntry, ...], methods: tuple[MethodEntry, ...], seeds: tuple[int, ...]
) -> int:
    """Datasets x grid points x seeds, refused above :data:`~harness.config.MAX_CELLS` before any is made."""
    points = sum(math.prod(len(v) for v in m.grid.values()) for m in methods)
    cells = len(datasets) * points * len(seeds)
    if cells > MAX_CELLS:
        raise InputError(
            "seeds",
            f"expected at most {MAX_CELLS:,} cells (datasets x grid points x seeds), got "
            f"{len(datasets)} x {points} x {len(seeds)} = {cells:,}",
        )
    return cells


def _entry(
    item: Any, at: str, keys: tuple[str, ...], what: str, use_hint: str
) -> tuple[Mapping[str, Any], str]:
    """A dataset or method entry: a bare name or a mapping with ``use``; returns (entry, use)."""
    if isinstance(item, str):
        item = {"use": item}
    item = mapping(item, at, f"a {what}")
    no_unknown(item, keys, at)
    if "use" not in item:
        raise InputError(f"{at}.use", f"missing: {use_hint}")
    use = item["use"]
    if not isinstance(use, str):
        raise InputError(f"{at}.use", f"expected a {what} name, got {show(use)}")
    return item, use


def holdout(raw: Any, where: str) -> float | int | None:
    """A held-out share: a fraction in (0, 1) or a count of points (at least 1); ``None`` when absent."""
    if raw is None:
        return None
    if isinstance(raw, bool) or not isinstance(raw, (int, float)):
        raise InputError(where, f"expected a fraction in (0, 1) or a count of points, got {show(raw)}")
    if isinstance(raw, int):
        if raw < 1:
            raise InputError(where, f"expected a fraction in (0, 1) or a count of points >= 1, got {raw}")
        return raw
    if not 0.0 < raw < 1.0:
        raise InputError(where, f"expected a fraction in (0, 1) or an integer count of points, got {raw}")
    return float(raw)


def out_of_sample(raw: Any, where: str) -> str:
    """A method entry's ``out_of_sample`` map (``""``: the method's own ``transform``)."""
    if raw is None:
        return ""
    if raw not in OUT_OF_SAMPLE_MAPS:
        raise InputError(where, f"expected one of {', '.join(OUT_OF_SAMPLE_MAPS)}, got {show(raw)}")
    return "" if raw == "transform" else str(raw)


def dataset_entries(
    raw: Any, where: str, base: Path, default_holdout: float | int | None = None
) -> tuple[DatasetEntry, ...]:
    """The ``datasets`` list; relative file paths are resolved against ``base``.

    Each entry's ``holdout`` overrides the suite's ``default_holdout``.
    """
    items = listed(raw, where, "datasets")
    if not items:
        raise InputError(where, "expected at least one dataset")
    out: list[DatasetEntry] = []
    for i, item in enumerate(items):
        at = f"{where}[{i}]"
        item, use = _entry(item, at, _DATASET_KEYS, "dataset", "the registry name of the dataset")
        spec = get_dataset_spec(use, f"{at}.use")
        params = validate_params(item.get("params"), spec.params, f"{at}.params")
        for key in _PATH_PARAMS:
            if isinstance(params.get(key), str):
                params[key] = str((base / params[key]).resolve())
        if any(p.name == "path" for p in spec.params) and params.get("path") is None:
            raise InputError(f"{at}.params.path", "missing: the file to read")
        share = holdout(item["holdout"], f"{at}.holdout") if "holdout" in item else default_holdout
        out.append(DatasetEntry(plain_name(item.get("name", use), f"{at}.name"), use, params, share))
    unique_names([d.name for d in out], where)
    return tuple(out)


def method_entries(
    raw: Any,
    where: str,
    roots: tuple[str, ...],
    *,
    resolve_plugins: bool = True,
    base: Path | None = None,
) -> tuple[MethodEntry, ...]:
    """The ``methods`` list.

    With ``resolve_plugins`` false, plug-in entries are taken as written (their
    parameters were checked when the suite first ran), so a finished run folder
    can be read without importing the plug-in.  Relative file paths in
    parameters (``embedding_file``'s ``path``) are resolved against ``base``.
    """
    items = listed(raw, where, "methods")
    if not items:
        raise InputError(where, "expected at least one method")
    out: list[MethodEntry] = []
    for i, item in enumerate(items):
        at = f"{where}[{i}]"
        item, use = _entry(
            item, at, _METHOD_KEYS, "method", "a registry name or a plug-in 'package.module:Name'"
        )
        default_name = use.rsplit(":", 1)[-1].lower() if ":" in use else use
        name = plain_name(item.get("name", default_name), f"{at}.name")
        if ":" in use and not resolve_plugins:
            params = dict(mapping(item.get("params") or {}, f"{at}.params", "parameters"))
            grid = {
                k: tuple(listed(v, f"{at}.grid.{k}", "values"))
                for k, v in mapping(item.get("grid") or {}, f"{at}.grid", "a grid").items()
            }
            oos = out_of_sample(item.get("out_of_sample"), f"{at}.out_of_sample")
            out.append(MethodEntry(name, use, params, grid, "other", oos))
            continue
        spec = get_method_spec(use, f"{at}.use", roots=roots)
        raw_params = dict(mapping(item.get("params") or {}, f"{at}.params", "parameters"))
        for key in _PATH_PARAMS:
            declared = any(p.name == key for p in spec.params)
            if declared and isinstance(raw_params.get(key), str) and base is not None:
                raw_params[key] = str((base / raw_params[key]).resolve())
        params = validate_params(raw_params, spec.params, f"{at}.params", fill_defaults=False)
        if any(p.name == "path" for p in spec.params) and params.get("path") is None:
            raise InputError(f"{at}.params.path", "missing: the file to read")
        grid = _grid(item.get("grid"), spec, params, f"{at}.grid")
        points = math.prod(len(v) for v in grid.values())
        if points > MAX_GRID_POINTS:
            raise InputError(
                f"{at}.grid", f"expected at most {MAX_GRID_POINTS:,} grid points, got {points:,} combinations"
            )
        oos = out_of_sample(item.get("out_of_sample"), f"{at}.out_of_sample")
        out.append(MethodEntry(name, use, params, grid, spec.family, oos))
    unique_names([m.name for m in out], where)
    return tuple(out)


def _grid(raw: Any, spec: MethodSpec, fixed: Mapping[str, Any], where: str) -> dict[str, tuple[Any, ...]]:
    if raw is None:
        return {}
    raw = mapping(raw, where, "a grid")
    known = {p.name: p for p in spec.params}
    grid: dict[str, tuple[Any, ...]] = {}
    for key, values in raw.items():
        if key not in known:
            raise InputError(f"{where}.{key}", f"unknown parameter of {spec.name}{suggest(key, known)}")
        if key in fixed:
            raise InputError(
                f"{where}.{key}",
                "expected each parameter either fixed in 'params' or varied in 'grid', not both",
            )
        values = listed(values, f"{where}.{key}", "the values to try")
        if not values:
            raise InputError(f"{where}.{key}", "expected at least one value (the grid is empty)")
        grid[key] = tuple(known[key].validate(v, f"{where}.{key}[{j}]") for j, v in enumerate(values))
        if len(set(map(repr, grid[key]))) != len(grid[key]):
            raise InputError(f"{where}.{key}", f"expected distinct values, got {list(grid[key])}")
    return grid


def scoring(raw: Any, where: str) -> Scoring:
    """The ``measures`` block."""
    if raw is None:
        return Scoring()
    raw = mapping(raw, where, "measure settings")
    no_unknown(raw, _SCORING_KEYS, where)
    ks = _ks(raw.get("k", [10]), f"{where}.k")
    est = raw.get("estimate_above")
    backend = _one_of(raw.get("backend", "local"), MEASURE_BACKENDS, f"{where}.backend")
    return Scoring(
        ks=ks,
        rank_by=_rank_by(raw.get("rank_by"), ks, f"{where}.rank_by"),
        pair_sample_above=integer(raw.get("pair_sample_above", 5000), f"{where}.pair_sample_above", low=3),
        pairs=integer(raw.get("pairs", 200_000), f"{where}.pairs", low=100),
        estimate_above=None if est is None else integer(est, f"{where}.estimate_above", low=10),
        queries=integer(raw.get("queries", 2000), f"{where}.queries", low=10),
        memory_bytes=None if raw.get("memory") is None else parse_size(raw["memory"], f"{where}.memory"),
        seed=integer(raw.get("seed", 0), f"{where}.seed", low=0),
        backend=backend,
    )


def _ks(raw: Any, where: str) -> tuple[int, ...]:
    single = isinstance(raw, int) and not isinstance(raw, bool)
    values = [raw] if single else listed(raw, where, "neighbourhood sizes")
    ks = tuple(integer(v, where if single else f"{where}[{i}]", low=1) for i, v in enumerate(values))
    if not ks:
        raise InputError(where, "expected at least one neighbourhood size")
    if len(set(ks)) != len(ks):
        raise InputError(where, f"expected distinct sizes, got {list(ks)}")
    return ks


def _rank_by(raw: Any, ks: tuple[int, ...], where: str) -> dict[str, float]:
    if raw is None:
        return dict(Scoring().rank_by)
    if isinstance(raw, list):
        for i, name in enumerate(raw):
            if not isinstance(name, str):
                raise InputError(f"{where}[{i}]", f"expected a measure name, got {show(name)}")
        raw = dict.fromkeys(raw, 1.0)
    raw = mapping(raw, where, "measures to rank by")
    if not raw:
        raise InputError(where, "expected at least one measure")
    out: dict[str, float] = {}
    for name, weight in raw.items():
        measure_key(name, f"{where}.{name}", ks)
        if isinstance(weight, bool) or not isinstance(weight, (int, float)) or not 0 < weight < math.inf:
            raise InputError(f"{where}.{name}", f"expected a positive finite weight, got {show(weight)}")
        out[name] = float(weight)
    return out


def run_settings(raw: Any, where: str) -> RunSettings:
    """The ``run`` block."""
    if raw is None:
        return RunSettings()
    raw = mapping(raw, where, "run settings")
    no_unknown(raw, _RUN_KEYS, where)
    backend = _one_of(raw.get("backend", "local"), BACKEND_NAMES, f"{where}.backend")
    scheduler = raw.get("scheduler")
    if scheduler is not None and (not isinstance(scheduler, str) or not scheduler.strip()):
        raise InputError(
            f"{where}.scheduler",
            f"expected a scheduler address such as tcp://10.0.0.5:8786, got {show(scheduler)}",
        )
    if scheduler is not None and backend != "dask":
        raise InputError(f"{where}.scheduler", "expected only together with backend: dask")
    jobs = raw.get("jobs")
    limit = raw.get("time_limit")
    if limit is not None and (
        isinstance(limit, bool) or not isinstance(limit, (int, float)) or not 0 < limit < math.inf
    ):
        raise InputError(f"{where}.time_limit", f"expected seconds > 0, got {show(limit)}")
    return RunSettings(
        jobs=None if jobs is None else integer(jobs, f"{where}.jobs", low=1),
        time_limit=None if limit is None else float(limit),
        quadratic_limit=integer(raw.get("quadratic_limit", 20_000), f"{where}.quadratic_limit", low=10),
        backend=backend,
        scheduler=scheduler,
    )


def _one_of(value: Any, allowed: Sequence[str], field: str) -> Any:
    """``value`` when it is one of ``allowed``, else a one-line InputError naming ``field``."""
    if value not in allowed:
        raise InputError(
            field, f"expected one of {', '.join(allowed)}, got {show(value)}{suggest(str(value), allowed)}"
        )
    return value
