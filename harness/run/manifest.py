"""What a run was made with: versions, machine, suite and data fingerprints."""

from __future__ import annotations

import functools
import hashlib
import importlib.metadata as md
import importlib.util
import os
import platform
import subprocess
import sys
from typing import Any

from threadpoolctl import threadpool_info

#: Environment variables that set thread counts of BLAS / OpenMP, which can move results.
THREAD_VARIABLES = (
    "OMP_NUM_THREADS",
    "OPENBLAS_NUM_THREADS",
    "MKL_NUM_THREADS",
    "BLIS_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
    "NUMEXPR_NUM_THREADS",
)

#: Distributions whose versions can move results.
TRACKED = ("foldbench", "numpy", "scipy", "scikit-learn", "pandas", "joblib", "threadpoolctl", "pyyaml")


def package_versions(extra_modules: tuple[str, ...] = ()) -> dict[str, str]:
    """Installed versions of the tracked distributions and of plug-in modules' packages."""
    return dict(_package_versions(tuple(extra_modules)))


@functools.lru_cache(maxsize=32)
def _package_versions(extra_modules: tuple[str, ...]) -> dict[str, str]:
    # Once per process: scanning the installed distributions takes about 0.5 s, and a
    # choose or a test session opens many runs.
    names = list(TRACKED)
    owners = md.packages_distributions() if extra_modules else {}
    for module in extra_modules:
        names += owners.get(module.split(".", 1)[0], [])
    out = {}
    for name in dict.fromkeys(names):
        try:
            out[name] = md.version(name)
        except md.PackageNotFoundError:
            out[name] = "not installed"
    return out


def blas_info() -> list[dict[str, Any]]:
    """BLAS / OpenMP libraries loaded, with versions and thread counts (threadpoolctl)."""
    keep = ("user_api", "internal_api", "version", "num_threads", "threading_layer", "architecture")
    return [{k: v for k, v in lib.items() if k in keep} for lib in threadpool_info()]


def thread_variables() -> dict[str, str]:
    """The thread-count environment variables that are set."""
    return {name: os.environ[name] for name in THREAD_VARIABLES if name in os.environ}


def plugin_sources(modules: tuple[str, ...]) -> dict[str, dict[str, Any]]:
    """Where each plug-in module comes from: its file and a SHA-256 of it.

    A plug-in that is not an installed distribution has no version to record;
    the hash of its source still tells two runs apart when the code changed.
    """
    out: dict[str, dict[str, Any]] = {}
    for module in dict.fromkeys(modules):
        try:
            spec = importlib.util.find_spec(module)
        except (ImportError, ValueError):
            spec = None
        origin = getattr(spec, "origin", None)
        entry: dict[str, Any] = {"file": origin, "sha256": None}
        if origin and os.path.isfile(origin):
            with open(origin, "rb") as fh:
                entry["sha256"] = hashlib.sha256(fh.read()).hexdigest()[:16]
        out[module] = entry
    return out


def cpu_model() -> str:
    """CPU model name from /proc/cpuinfo, else :func:`platform.processor`."""
    try:
        with open("/proc/cpuinfo", encoding="utf-8", errors="replace") as fh:
            for line in fh:
                if line.lower().startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def git_commit(folder: str | None = None) -> str | None:
    """Commit of the git work tree containing ``folder`` (``+dirty`` if modified), or ``None``."""
    try:
        head = subprocess.run(
            ["git", "rev-parse", "HEAD"], cwd=folder, capture_output=True, check=False, text=True, timeout=5
        )
        if head.returncode != 0:
            return None
        dirty = subprocess.run(
            ["git", "status", "--porcelain", "--untracked-files=no"],
            cwd=folder,
            capture_output=True,
            check=False,
            text=True,
            timeout=5,
        ).stdout.strip()
        return head.stdout.strip() + ("+dirty" if dirty else "")
    except (OSError, subprocess.SubprocessError):
        return None


def environment(plugin_modules: tuple[str, ...] = (), method_modules: tuple[str, ...] = ()) -> dict[str, Any]:
    """Everything about this machine and its software that can move results.

    ``plugin_modules`` are the suite's plug-ins (their packages and sources are
    recorded); ``method_modules`` the optional packages of built-in adapters
    (their versions are recorded).
    """
    return {
        "python": sys.version.split()[0],
        "implementation": platform.python_implementation(),
        "platform": platform.platform(),
        "machine": platform.machine(),
        "cpu_model": cpu_model(),
        "cpu_count": os.cpu_count(),
        "packages": package_versions(plugin_modules + method_modules),
        "blas": blas_info(),
        "thread_env": thread_variables(),
        "plugins": plugin_sources(plugin_modules),
        "git_commit": git_commit(),
    }
