"""What differs between the environments of two runs, read from their manifests."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from ..text import seed_range

_ARROW = "→"


def environment_changes(baseline: Mapping[str, Any], current: Mapping[str, Any]) -> list[str]:
    """What differs between two run manifests, as lines like ``scikit-learn 1.8.0 → 1.9.1``.

    Covers Python, OS, CPU, package versions (plug-ins' too), plug-in sources,
    BLAS libraries and thread counts, thread environment variables, git
    commit, suite hash, seeds and dataset fingerprints.
    """
    env_b, env_c = baseline.get("environment") or {}, current.get("environment") or {}
    out: list[str] = []

    def note(label: str, old: Any, new: Any) -> None:
        if old != new:
            out.append(f"{label} {_text(old)} {_ARROW} {_text(new)}")

    for key, label in (
        ("python", "Python"),
        ("implementation", "Python implementation"),
        ("platform", "OS"),
        ("machine", "machine"),
        ("cpu_model", "CPU"),
        ("cpu_count", "CPU count"),
        ("git_commit", "git commit"),
    ):
        note(label, env_b.get(key), env_c.get(key))
    for label, old, new in _paired(env_b.get("packages") or {}, env_c.get("packages") or {}):
        note(label, old, new)
    for label, old, new in _paired(env_b.get("thread_env") or {}, env_c.get("thread_env") or {}):
        note(label, old, new)
    plug_b, plug_c = env_b.get("plugins") or {}, env_c.get("plugins") or {}
    for label, old, new in _paired(
        {k: (v or {}).get("sha256") for k, v in plug_b.items()},
        {k: (v or {}).get("sha256") for k, v in plug_c.items()},
    ):
        note(f"plug-in {label} source", old, new)
    for label, old, new in _paired(_blas(env_b.get("blas")), _blas(env_c.get("blas"))):
        note(label, old, new)
    note("suite hash", (baseline.get("suite") or {}).get("hash"), (current.get("suite") or {}).get("hash"))
    note("seeds", seed_range(baseline.get("seeds")), seed_range(current.get("seeds")))
    fp_b = {k: (v or {}).get("fingerprint") for k, v in (baseline.get("datasets") or {}).items()}
    fp_c = {k: (v or {}).get("fingerprint") for k, v in (current.get("datasets") or {}).items()}
    for name, old, new in _paired(fp_b, fp_c):
        note(f"dataset {name} fingerprint", old, new)
    return out


def _paired(old: Mapping[str, Any], new: Mapping[str, Any]) -> list[tuple[str, Any, Any]]:
    return [(k, old.get(k), new.get(k)) for k in dict.fromkeys([*old, *new])]


def _blas(libs: Any) -> dict[str, Any]:
    """Loaded BLAS / OpenMP libraries as a set keyed by library and API, not by load order.

    Two copies of one library (NumPy's and SciPy's bundled OpenBLAS) load in
    whichever order imports happen; each key holds the sorted set of values of
    every copy, so the same environment always compares equal.
    """
    groups: dict[tuple[str, str], list[Mapping[str, Any]]] = {}
    for lib in libs or []:
        if not isinstance(lib, Mapping):
            continue
        internal = str(lib.get("internal_api") or lib.get("user_api") or "library")
        groups.setdefault((internal, str(lib.get("user_api") or "")), []).append(lib)
    internals = [internal for internal, _ in groups]
    out: dict[str, Any] = {}
    for (internal, user), members in sorted(groups.items()):
        name = internal if internals.count(internal) == 1 else f"{internal} ({user or 'unknown API'})"
        out[name] = _value_set(m.get("version") for m in members)
        out[f"{name} threads"] = _value_set(m.get("num_threads") for m in members)
        for extra in ("threading_layer", "architecture"):
            values = _value_set(m.get(extra) for m in members)
            if values is not None:
                out[f"{name} {extra.replace('_', ' ')}"] = values
    return out


def _value_set(values: Any) -> Any:
    """The distinct values, sorted: one value as itself, several joined by ', ', none as None."""
    distinct = sorted({str(v) for v in values if v is not None})
    if not distinct:
        return None
    return distinct[0] if len(distinct) == 1 else ", ".join(distinct)


def _text(value: Any) -> str:
    return "(none)" if value is None else str(value)
