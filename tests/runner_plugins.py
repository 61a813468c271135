"""Plug-in methods that misbehave on purpose, for runner tests (plumbing only)."""

from __future__ import annotations

import os
import time

import numpy as np


class _Base:
    def __init__(self, n_components: int = 2, random_state: int | None = None) -> None:
        self.n_components = n_components
        self.random_state = random_state

    def _first_columns(self, X: np.ndarray) -> np.ndarray:
        return np.asarray(X, dtype=float)[:, : self.n_components].copy()


class Raises(_Base):
    """Raises an ordinary exception in fit_transform."""

    def fit_transform(self, X):
        raise RuntimeError("this plug-in always fails")


class Sleeps(_Base):
    """Sleeps longer than any sensible time limit."""

    def __init__(self, n_components: int = 2, random_state: int | None = None, seconds: float = 60.0):
        super().__init__(n_components, random_state)
        self.seconds = seconds

    def fit_transform(self, X):
        time.sleep(self.seconds)
        return self._first_columns(X)


class Exits(_Base):
    """Kills its own process without a word, as a segfault or an OOM kill would."""

    def fit_transform(self, X):
        os._exit(3)


class RunsOutOfMemory(_Base):
    """Raises MemoryError, as a failed large allocation does."""

    def fit_transform(self, X):
        raise MemoryError()


class FirstColumns(_Base):
    """Keeps the first columns: a cheap, deterministic embedding."""

    def fit_transform(self, X):
        return self._first_columns(X)


class Noisy(_Base):
    """The first columns plus seeded noise of a chosen size (a method made worse on purpose)."""

    def __init__(self, n_components: int = 2, random_state: int | None = None, noise: float = 0.0):
        super().__init__(n_components, random_state)
        self.noise = noise

    def fit_transform(self, X):
        rng = np.random.default_rng(self.random_state)
        Y = self._first_columns(X)
        return Y + self.noise * Y.std() * rng.standard_normal(Y.shape)


class Chatty(_Base):
    """Prints many lines (Python and file-descriptor level) and logs many distinct warnings."""

    def __init__(
        self, n_components: int = 2, random_state: int | None = None, lines: int = 10, warnings: int = 0
    ):
        super().__init__(n_components, random_state)
        self.lines = lines
        self.warnings = warnings

    def fit_transform(self, X):
        import logging
        import sys

        for i in range(self.lines):
            print(f"chatty line {i}")
        print(f"chatty seed {self.random_state}")
        sys.stdout.flush()
        os.write(2, b"chatty wrote to file descriptor 2\n")
        for i in range(self.warnings):
            logging.getLogger("chatty").warning("chatty warning number %d", i)
        for _ in range(5):
            logging.getLogger("chatty").warning("chatty says the same thing again")
        return self._first_columns(X)


_HELD_LOCK = None


class HoldsNamedLock(_Base):
    """Keeps a process-wide named semaphore and is slow to exit, as numba's parallel layer is."""

    def fit_transform(self, X):
        import multiprocessing
        from multiprocessing import util

        global _HELD_LOCK
        _HELD_LOCK = multiprocessing.get_context().RLock()
        # runs before the semaphore's own finalizer (higher priority first): a slow shutdown
        util.Finalize(None, time.sleep, args=(0.5,), exitpriority=100)
        return self._first_columns(X)


class SlowsWithSize(_Base):
    """The first columns, after sleeping ``(n / scale)**2`` seconds: cheap on subsamples, dear on all rows."""

    def __init__(self, n_components: int = 2, random_state: int | None = None, scale: float = 100.0):
        super().__init__(n_components, random_state)
        self.scale = scale

    def fit_transform(self, X):
        time.sleep((len(X) / self.scale) ** 2)
        return self._first_columns(X)


class ReportsThreads(_Base):
    """Prints the BLAS thread limits it runs under (threadpoolctl), then returns two columns."""

    def fit_transform(self, X):
        from threadpoolctl import threadpool_info

        limits = sorted({lib["num_threads"] for lib in threadpool_info() if lib["user_api"] == "blas"})
        print(f"blas threads {limits}")
        return self._first_columns(X)
