"""Suite files: YAML in, a validated :class:`Suite` value out.

Validation happens here, once, before anything runs.  Every problem is an
:class:`~harness.errors.InputError` naming the file, the path inside it
(``methods[1].grid.perplexity[2]``) and what was expected.
"""
from __future__ import annotations

import hashlib
import itertools
import re
import sys
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from ._params import validate_params
from .datasets import Dataset, get_dataset_spec, load_dataset
from .errors import InputError, suggest
from .expect import Expectation, parse_expectations, parse_tolerances
from .methods import MethodSpec, get_method_spec
from .metrics import MEASURES

_SAFE_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")
_PATH_PARAMS = ("path", "labels_path")
_SUITE_KEYS = ("name", "description", "seeds", "dimensions", "datasets", "methods", "measures",
               "run", "expect", "tolerances")
_DATASET_KEYS = ("use", "name", "params")
_METHOD_KEYS = ("use", "name", "params", "grid")
BACKENDS = ("local", "dask")
_SIZE_UNITS = {"": 1, "b": 1, "kb": 10**3, "mb": 10**6, "gb": 10**9, "kib": 2**10, "mib": 2**20,
               "gib": 2**30}


@dataclass(frozen=True)
class DatasetEntry:
    """A dataset named in a suite: registry name, label and validated parameters."""

    name: str
    use: str
    params: Mapping[str, Any]


@dataclass(frozen=True)
class MethodEntry:
    """A method named in a suite: fixed parameters plus a grid to expand."""

    name: str
    use: str
    params: Mapping[str, Any]
    grid: Mapping[str, tuple]

    def grid_points(self) -> list[dict[str, Any]]:
        """Every combination of the grid, each merged over the fixed parameters."""
        keys = list(self.grid)
        points = []
        for values in itertools.product(*(self.grid[k] for k in keys)):
            point = dict(self.params)
            point.update(zip(keys, values))
            points.append(point)
        return points


@dataclass(frozen=True)
class Scoring:
    """How cells are scored.

    Attributes
    ----------
    ks : tuple of int
        Neighbourhood sizes for the local measures.
    rank_by : mapping
        Measure name (``trustworthiness`` or ``trustworthiness@30``) to weight.
    pair_sample_above : int
        Above this many points the pairwise-distance measures use sampled pairs.
    pairs : int
        Number of sampled pairs.
    estimate_above : int or None
        Above this many points the local measures are estimated from query points.
    queries : int
        Number of query points for estimates.
    memory_bytes : int or None
        Memory budget for the neighbourhood engine (``None``: a safe share of RAM).
    seed : int
        Seed of every sample drawn while scoring (the same for all methods, so
        differences between methods are not sampling noise).
    """

    ks: tuple[int, ...] = (10,)
    rank_by: Mapping[str, float] = field(default_factory=lambda: {
        "trustworthiness": 1.0, "continuity": 1.0, "shepard_spearman": 1.0})
    pair_sample_above: int = 5000
    pairs: int = 200_000
    estimate_above: int | None = None
    queries: int = 2000
    memory_bytes: int | None = None
    seed: int = 0


@dataclass(frozen=True)
class RunSettings:
    """How cells are executed (all can be overridden on the command line)."""

    jobs: int | None = None
    time_limit: float | None = None
    quadratic_limit: int = 20_000
    backend: str = "local"
    scheduler: str | None = None


@dataclass(frozen=True)
class Suite:
    """A validated suite: what to embed, with what, how often and how to score it."""

    name: str
    description: str
    seeds: tuple[int, ...]
    dimensions: int
    datasets: tuple[DatasetEntry, ...]
    methods: tuple[MethodEntry, ...]
    scoring: Scoring
    run: RunSettings
    expect: tuple[Expectation, ...] = ()
    tolerances: Mapping[str, Any] = field(default_factory=dict)  # measure -> Tolerance, plus "alpha"
    path: str = "<suite>"
    text: str = ""

    @property
    def digest(self) -> str:
        """SHA-256 of the suite text, 16 hex characters."""
        return hashlib.sha256(self.text.encode()).hexdigest()[:16]


# ---------------------------------------------------------------- parsing helpers

def _mapping(value: Any, where: str, what: str) -> Mapping[str, Any]:
    if not isinstance(value, Mapping):
        raise InputError(where, f"expected {what} (a mapping of keys to values), got {_show(value)}")
    for key in value:
        if not isinstance(key, str):
            raise InputError(where, f"expected text keys, got {key!r}")
    return value


def _list(value: Any, where: str, what: str) -> list[Any]:
    if not isinstance(value, list):
        raise InputError(where, f"expected {what} (a list), got {_show(value)}")
    return value


def _no_unknown(mapping: Mapping[str, Any], known: tuple[str, ...], where: str) -> None:
    for key in mapping:
        if key not in known:
            prefix = f"{where}." if where else ""
            raise InputError(f"{prefix}{key}".lstrip("."),
                             f"unknown key{suggest(key, known)}; expected one of {', '.join(known)}")


def _int(value: Any, where: str, low: int | None = None) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise InputError(where, f"expected an integer, got {_show(value)}")
    if low is not None and value < low:
        raise InputError(where, f"expected an integer >= {low}, got {value}")
    return value


def _name(value: Any, where: str) -> str:
    if not isinstance(value, str) or not _SAFE_NAME.match(value) or ".." in value:
        raise InputError(where, "expected a name of letters, digits, '_', '-' or '.' (at most 64, "
                                f"starting with a letter or digit, no '..'), got {_show(value)}")
    return value


def _show(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def parse_size(value: Any, where: str) -> int:
    """Parse a memory size such as ``2GB``, ``512MiB`` or a number of bytes."""
    if isinstance(value, int) and not isinstance(value, bool) and value > 0:
        return value
    if isinstance(value, str):
        m = re.fullmatch(r"\s*([0-9]+(?:\.[0-9]+)?)\s*([A-Za-z]*)\s*", value)
        if m and m.group(2).lower() in _SIZE_UNITS:
            size = int(float(m.group(1)) * _SIZE_UNITS[m.group(2).lower()])
            if size > 0:
                return size
    raise InputError(where, f"expected a memory size such as 2GB or 512MiB, got {_show(value)}")


# ---------------------------------------------------------------- sections

def _seeds(raw: Any, where: str) -> tuple[int, ...]:
    if raw is None:
        return (0, 1, 2)
    if isinstance(raw, int) and not isinstance(raw, bool):
        return tuple(range(_int(raw, where, low=1)))
    seeds = tuple(_int(v, f"{where}[{i}]", low=0) for i, v in enumerate(_list(raw, where, "seeds")))
    if not seeds:
        raise InputError(where, "expected at least one seed")
    if len(set(seeds)) != len(seeds):
        raise InputError(where, f"expected distinct seeds, got {list(seeds)}")
    return seeds


def _entry(item: Any, at: str, keys: tuple[str, ...], what: str, use_hint: str
           ) -> tuple[Mapping[str, Any], str]:
    """A dataset or method entry: a bare name or a mapping with ``use``; returns (entry, use)."""
    if isinstance(item, str):
        item = {"use": item}
    item = _mapping(item, at, f"a {what}")
    _no_unknown(item, keys, at)
    if "use" not in item:
        raise InputError(f"{at}.use", f"missing: {use_hint}")
    use = item["use"]
    if not isinstance(use, str):
        raise InputError(f"{at}.use", f"expected a {what} name, got {_show(use)}")
    return item, use


def _dataset_entries(raw: Any, where: str, base: Path) -> tuple[DatasetEntry, ...]:
    items = _list(raw, where, "datasets")
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
        missing = [p.name for p in spec.params if p.default is None and params.get(p.name) is None
                   and p.name in ("path",)]
        if missing:
            raise InputError(f"{at}.params.{missing[0]}", "missing: the file to read")
        out.append(DatasetEntry(_name(item.get("name", use), f"{at}.name"), use, params))
    _unique([d.name for d in out], where)
    return tuple(out)


def _method_entries(raw: Any, where: str) -> tuple[MethodEntry, ...]:
    items = _list(raw, where, "methods")
    if not items:
        raise InputError(where, "expected at least one method")
    out: list[MethodEntry] = []
    for i, item in enumerate(items):
        at = f"{where}[{i}]"
        item, use = _entry(item, at, _METHOD_KEYS, "method",
                           "a registry name or a plug-in 'package.module:Name'")
        spec = get_method_spec(use, f"{at}.use")
        params = validate_params(item.get("params"), spec.params, f"{at}.params", fill_defaults=False)
        grid = _grid(item.get("grid"), spec, params, f"{at}.grid")
        default_name = use.rsplit(":", 1)[-1].lower() if ":" in use else use
        out.append(MethodEntry(_name(item.get("name", default_name), f"{at}.name"), use, params, grid))
    _unique([m.name for m in out], where, hint="give each entry its own 'name'")
    return tuple(out)


def _grid(raw: Any, spec: MethodSpec, fixed: Mapping[str, Any], where: str) -> dict[str, tuple]:
    if raw is None:
        return {}
    raw = _mapping(raw, where, "a grid")
    known = {p.name: p for p in spec.params}
    grid: dict[str, tuple] = {}
    for key, values in raw.items():
        if key not in known:
            raise InputError(f"{where}.{key}", f"unknown parameter of {spec.name}{suggest(key, known)}")
        if key in fixed:
            raise InputError(f"{where}.{key}", "expected each parameter either fixed in 'params' or "
                                               "varied in 'grid', not both")
        values = _list(values, f"{where}.{key}", "the values to try")
        if not values:
            raise InputError(f"{where}.{key}", "expected at least one value (the grid is empty)")
        grid[key] = tuple(known[key].validate(v, f"{where}.{key}[{j}]") for j, v in enumerate(values))
        if len(set(map(repr, grid[key]))) != len(grid[key]):
            raise InputError(f"{where}.{key}", f"expected distinct values, got {list(grid[key])}")
    return grid


def _unique(names: list[str], where: str, hint: str = "give each entry its own 'name'") -> None:
    seen: set[str] = set()
    for i, name in enumerate(names):
        if name in seen:
            raise InputError(f"{where}[{i}].name", f"expected a unique name, '{name}' is used twice; {hint}")
        seen.add(name)


def _scoring(raw: Any, where: str) -> Scoring:
    if raw is None:
        return Scoring()
    raw = _mapping(raw, where, "measure settings")
    keys = ("k", "rank_by", "pair_sample_above", "pairs", "estimate_above", "queries", "memory", "seed")
    _no_unknown(raw, keys, where)
    ks_raw = raw.get("k", [10])
    ks_list = [ks_raw] if isinstance(ks_raw, int) and not isinstance(ks_raw, bool) else \
        _list(ks_raw, f"{where}.k", "neighbourhood sizes")
    ks = tuple(_int(v, f"{where}.k[{i}]" if isinstance(ks_raw, list) else f"{where}.k", low=1)
               for i, v in enumerate(ks_list))
    if not ks:
        raise InputError(f"{where}.k", "expected at least one neighbourhood size")
    if len(set(ks)) != len(ks):
        raise InputError(f"{where}.k", f"expected distinct sizes, got {list(ks)}")
    rank_by = _rank_by(raw.get("rank_by"), ks, f"{where}.rank_by")
    est = raw.get("estimate_above")
    return Scoring(
        ks=ks,
        rank_by=rank_by,
        pair_sample_above=_int(raw.get("pair_sample_above", 5000), f"{where}.pair_sample_above", low=3),
        pairs=_int(raw.get("pairs", 200_000), f"{where}.pairs", low=100),
        estimate_above=None if est is None else _int(est, f"{where}.estimate_above", low=10),
        queries=_int(raw.get("queries", 2000), f"{where}.queries", low=10),
        memory_bytes=None if raw.get("memory") is None else parse_size(raw["memory"], f"{where}.memory"),
        seed=_int(raw.get("seed", 0), f"{where}.seed", low=0),
    )


def _rank_by(raw: Any, ks: tuple[int, ...], where: str) -> dict[str, float]:
    if raw is None:
        return dict(Scoring().rank_by)
    if isinstance(raw, list):
        for i, name in enumerate(raw):
            if not isinstance(name, str):
                raise InputError(f"{where}[{i}]", f"expected a measure name, got {_show(name)}")
        raw = {name: 1.0 for name in raw}
    raw = _mapping(raw, where, "measures to rank by")
    if not raw:
        raise InputError(where, "expected at least one measure")
    out: dict[str, float] = {}
    for name, weight in raw.items():
        stem, _, k = name.partition("@")
        if stem not in MEASURES:
            raise InputError(f"{where}.{name}", f"unknown measure{suggest(stem, MEASURES)}; "
                                                "see 'foldbench list measures'")
        if k and (not k.isdigit() or int(k) not in ks or not MEASURES[stem].per_k):
            raise InputError(f"{where}.{name}", f"expected '{stem}' or '{stem}@k' with k one of "
                                                f"measures.k {list(ks)}")
        if isinstance(weight, bool) or not isinstance(weight, (int, float)) or weight <= 0:
            raise InputError(f"{where}.{name}", f"expected a positive weight, got {_show(weight)}")
        out[name] = float(weight)
    return out


def _run_settings(raw: Any, where: str) -> RunSettings:
    if raw is None:
        return RunSettings()
    raw = _mapping(raw, where, "run settings")
    _no_unknown(raw, ("jobs", "time_limit", "quadratic_limit", "backend", "scheduler"), where)
    backend = raw.get("backend", "local")
    if backend not in BACKENDS:
        raise InputError(f"{where}.backend", f"expected one of {', '.join(BACKENDS)}, got {_show(backend)}"
                                             f"{suggest(str(backend), BACKENDS)}")
    scheduler = raw.get("scheduler")
    if scheduler is not None and (not isinstance(scheduler, str) or not scheduler.strip()):
        raise InputError(f"{where}.scheduler", f"expected a scheduler address such as "
                                               f"tcp://10.0.0.5:8786, got {_show(scheduler)}")
    if scheduler is not None and backend != "dask":
        raise InputError(f"{where}.scheduler", "expected only together with backend: dask")
    jobs = raw.get("jobs")
    limit = raw.get("time_limit")
    if limit is not None and (isinstance(limit, bool) or not isinstance(limit, (int, float)) or limit <= 0):
        raise InputError(f"{where}.time_limit", f"expected seconds > 0, got {_show(limit)}")
    return RunSettings(
        jobs=None if jobs is None else _int(jobs, f"{where}.jobs", low=1),
        time_limit=None if limit is None else float(limit),
        quadratic_limit=_int(raw.get("quadratic_limit", 20_000), f"{where}.quadratic_limit", low=10),
        backend=backend,
        scheduler=scheduler,
    )


# ---------------------------------------------------------------- public entry points

def _allow_plugins_from(folder: Path) -> None:
    """Let ``package.module:Name`` plug-ins import from the working folder and the suite's folder.

    The console script does not put the working folder on the import path the way
    ``python -m`` does; a plug-in module next to the suite is what users expect to work.
    """
    for place in (str(Path.cwd()), str(folder)):
        if place not in sys.path:
            sys.path.append(place)



def parse_suite(text: str, path: str = "<suite>") -> Suite:
    """Validate suite text (YAML) and return a :class:`Suite`.

    Parameters
    ----------
    text : str
        The YAML document.
    path : str
        Name of the file, used in messages and to resolve relative data paths.

    Returns
    -------
    Suite

    Raises
    ------
    InputError
        On the first problem found, naming the file and the path inside it.
    """
    label = Path(path).name

    def fail(err: InputError) -> InputError:
        return InputError(f"{label}: {err.where}" if err.where else label, err.expected)

    try:
        doc = yaml.safe_load(text)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        at = f" line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise InputError(f"{label}:{at}".rstrip(":"), f"expected valid YAML ({problem})") from None
    base = Path(path).resolve().parent if path != "<suite>" else Path.cwd()
    _allow_plugins_from(base)
    try:
        if not isinstance(doc, Mapping):
            raise InputError("", f"expected a mapping with keys name, datasets, methods, ...; got {_show(doc)}")
        doc = _mapping(doc, "", "a suite")
        _no_unknown(doc, _SUITE_KEYS, "")
        for required in ("name", "datasets", "methods"):
            if required not in doc:
                raise InputError(required, "missing: every suite needs name, datasets and methods")
        desc = doc.get("description", "")
        if not isinstance(desc, str):
            raise InputError("description", f"expected text, got {_show(desc)}")
        expect = doc.get("expect") or []
        tolerances = doc.get("tolerances") or {}
        return Suite(
            name=_name(doc["name"], "name"),
            description=desc,
            seeds=_seeds(doc.get("seeds"), "seeds"),
            dimensions=_int(doc.get("dimensions", 2), "dimensions", low=1),
            datasets=_dataset_entries(doc["datasets"], "datasets", base),
            methods=_method_entries(doc["methods"], "methods"),
            scoring=_scoring(doc.get("measures"), "measures"),
            run=_run_settings(doc.get("run"), "run"),
            expect=parse_expectations(expect, "expect", doc),
            tolerances=parse_tolerances(tolerances, "tolerances"),
            path=str(path),
            text=text,
        )
    except InputError as err:
        raise fail(err) from None


def load_suite(path: str | Path) -> Suite:
    """Read and validate a suite file.

    Parameters
    ----------
    path : str or Path
        The YAML file.

    Returns
    -------
    Suite
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(str(p), "no such file: expected a suite (YAML)") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(str(p), f"cannot read the suite ({exc.__class__.__name__}: {exc})") from None
    return parse_suite(text, str(p))


def load_datasets(suite: Suite) -> dict[str, Dataset]:
    """Load every dataset of a suite and check the suite against their sizes.

    Checks that need the data: k < n - 1 for every k, perplexity < n / 3,
    n_neighbors < n, dimensions <= n_features.

    Returns
    -------
    dict
        Dataset name to :class:`Dataset`, in suite order.
    """
    label = Path(suite.path).name
    data: dict[str, Dataset] = {}
    for i, entry in enumerate(suite.datasets):
        try:
            data[entry.name] = load_dataset(entry.use, dict(entry.params), label=entry.name)
        except InputError as err:
            raise InputError(err.where or f"{label}: datasets[{i}]", err.expected) from None
    for i, entry in enumerate(suite.datasets):
        _check_against(suite, data[entry.name], f"datasets[{i}] ('{entry.name}')", label)
    return data


def _check_against(suite: Suite, ds: Dataset, which: str, label: str) -> None:
    n = ds.n
    for j, k in enumerate(suite.scoring.ks):
        if k >= n - 1:
            raise InputError(f"{label}: measures.k[{j}]",
                             f"expected k < n - 1 = {n - 1} for {which} with n={n}, got {k}")
    if ds.n_features is not None and suite.dimensions > ds.n_features:
        raise InputError(f"{label}: dimensions", f"expected at most {ds.n_features} (the number of "
                                                 f"features of {which}), got {suite.dimensions}")
    if suite.dimensions >= n:
        raise InputError(f"{label}: dimensions", f"expected fewer than n={n} for {which}, got {suite.dimensions}")
    limits = {"perplexity": (n / 3, "n/3"), "n_neighbors": (n - 1, "n - 1")}
    for mi, m in enumerate(suite.methods):
        for key, (bound, text) in limits.items():
            places = [(f"methods[{mi}].params.{key}", m.params[key])] if key in m.params else []
            places += [(f"methods[{mi}].grid.{key}[{j}]", v) for j, v in enumerate(m.grid.get(key, ()))]
            for at, value in places:
                if isinstance(value, (int, float)) and value >= bound:
                    raise InputError(f"{label}: {at}", f"expected {key} < {text} = {bound:g} for {which} "
                                                       f"with n={n}, got {value}")

