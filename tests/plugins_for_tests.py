"""Small estimator classes that tests name as plug-ins (``plugins_for_tests:Name``).

Plain module of tiny classes; add more as tests need them.
"""

from __future__ import annotations

import warnings

import numpy as np


class ScaledProjection:
    """Gaussian random projection, multiplied by ``scale``."""

    def __init__(self, n_components=2, scale=1.0, random_state=None):
        self.n_components = n_components
        self.scale = scale
        self.random_state = random_state

    def fit_transform(self, X, y=None):
        rng = np.random.default_rng(self.random_state)
        return self.scale * (X @ rng.standard_normal((X.shape[1], self.n_components)))


class FirstColumns:
    """Keeps the first columns of its input; takes distance matrices too."""

    accepts_distances = True
    quadratic_memory = True

    def __init__(self, n_components=2, metric="euclidean"):
        self.n_components = n_components
        self.metric = metric

    def fit_transform(self, X, y=None):
        return np.asarray(X, dtype=float)[:, : self.n_components]


def make_projection(n_components=2):
    """Factory returning an estimator (plug-ins may be callables, not only classes)."""
    return ScaledProjection(n_components=n_components, random_state=0)


class ReturnsNaN:
    """Returns an embedding with one NaN."""

    def __init__(self, n_components=2):
        self.n_components = n_components

    def fit_transform(self, X, y=None):
        Y = np.ones((X.shape[0], self.n_components)) * np.arange(X.shape[0])[:, None]
        Y[0, 0] = np.nan
        return Y


class ReturnsWrongShape:
    """Returns one column too many."""

    def __init__(self, n_components=2):
        self.n_components = n_components

    def fit_transform(self, X, y=None):
        return np.arange(X.shape[0] * (self.n_components + 1), dtype=float).reshape(X.shape[0], -1)


class ReturnsOnePoint:
    """Puts every item on the same point."""

    def __init__(self, n_components=2):
        self.n_components = n_components

    def fit_transform(self, X, y=None):
        return np.full((X.shape[0], self.n_components), 3.0)


class WarnsWhileFitting:
    """Emits a warning, then returns the first columns."""

    def __init__(self, n_components=2):
        self.n_components = n_components

    def fit_transform(self, X, y=None):
        warnings.warn("did not converge", RuntimeWarning, stacklevel=2)
        return X[:, : self.n_components]


class NoFitTransform:
    """A class that is not an estimator."""

    def fit(self, X):
        return self


NOT_AN_ESTIMATOR = 42
