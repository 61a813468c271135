"""Pieces shared by the dataset loaders: common parameters, subsampling, scaling."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from ..errors import InputError
from ..params import Param, at_least
from ..text import squeeze


def positive(v: Any) -> str | None:
    """Check ``value > 0``."""
    return None if v > 0 else "a number > 0"


def seed_param() -> Param:
    """The ``seed`` parameter every generated or subsampled dataset takes."""
    return Param("seed", int, 0, "seed of the random generator (same seed, same data)", check=at_least(0))


def size_param(default: int, minimum: int) -> Param:
    """The ``n`` parameter (number of points) of a generated dataset."""
    return Param("n", int, default, f"number of points (at least {minimum})", check=at_least(minimum))


def noise_param(default: float, doc: str) -> Param:
    """A ``noise`` parameter: a non-negative standard deviation or multiplier."""
    return Param("noise", float, default, doc, check=at_least(0.0))


def standardise_param(default: bool) -> Param:
    """The ``standardise`` switch (each column to mean 0, standard deviation 1)."""
    return Param(
        "standardise", bool, default, "scale every feature column to mean 0 and standard deviation 1"
    )


def standardise(X: np.ndarray) -> np.ndarray:
    """Centre columns and divide by their standard deviation (``ddof=0``).

    Constant columns (such as the always-blank corner pixels of ``digits``)
    are only centred, so they become zeros rather than NaN.
    """
    std = X.std(axis=0)
    return (X - X.mean(axis=0)) / np.where(std > 0, std, 1.0)


def stratified_rows(labels: np.ndarray | None, n_total: int, n: int, seed: int, where: str) -> np.ndarray:
    """Choose ``n`` of ``n_total`` rows at random, keeping class shares when labelled.

    Each class gets ``n`` times its share, rounded down, and the rows left over
    go to the classes with the largest remainders, so shares match as closely
    as whole numbers allow.

    Parameters
    ----------
    labels : ndarray of shape (n_total,) or None
        Class of every row; ``None`` draws a plain random sample.
    n_total : int
        Number of rows available.
    n : int
        Number of rows wanted.
    seed : int
        Seed of the generator.
    where : str
        Location for the error message when ``n`` is too large.

    Returns
    -------
    ndarray of int
        Chosen row indices in increasing order.
    """
    if n > n_total:
        raise InputError(where, f"at most {n_total} rows (all of them), got {n}")
    rng = np.random.default_rng(seed)
    if labels is None:
        return np.sort(rng.choice(n_total, size=n, replace=False))
    _classes, inverse, counts = np.unique(labels, return_inverse=True, return_counts=True)
    exact = n * counts / n_total
    quota = np.floor(exact).astype(int)
    # stable sort so ties in the remainder go to the earlier class, deterministically
    extra = np.argsort(-(exact - quota), kind="stable")[: n - quota.sum()]
    quota[extra] += 1
    chosen = [rng.choice(np.flatnonzero(inverse == c), size=q, replace=False) for c, q in enumerate(quota)]
    return np.sort(np.concatenate(chosen))


def checked(fn: Callable[..., Any], where: str, what: str) -> Any:
    """Call ``fn()`` and turn any read failure into an :class:`InputError`."""
    try:
        return fn()
    except InputError:
        raise
    except (OSError, ValueError, TypeError, UnicodeDecodeError, ImportError) as exc:
        raise InputError(where, f"{what} ({squeeze(exc) or type(exc).__name__})") from exc
