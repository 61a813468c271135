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
    out: dict[str, Any] = {}
    for lib in libs or []:
        name = lib.get("internal_api") or lib.get("user_api") or "library"
        out[name] = lib.get("version")
        out[f"{name} threads"] = lib.get("num_threads")
        for extra in ("threading_layer", "architecture"):
            if lib.get(extra) is not None:
                out[f"{name} {extra.replace('_', ' ')}"] = lib[extra]
    return out


def _text(value: Any) -> str:
    return "(none)" if value is None else str(value)
