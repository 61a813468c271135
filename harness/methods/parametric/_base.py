"""What the parametric estimators share: input handling, the split, fitting and ``transform``.

The network reads standardised inputs (each feature centred and divided by its
standard deviation, both learned on the training rows), which keeps the first
layer well conditioned.  The losses, however, compare the network's outputs
with distances of the data *as given*, divided by one global scale (the root
mean squared distance between training rows): standardising each feature would
change the geometry to be kept, and one global scale leaves it intact while
making the result independent of the data's units.

Training runs with one BLAS thread: a step multiplies matrices of a few hundred
rows, where threads cost more in synchronisation than they save, and far more
when other jobs share the cores (digits with parametric t-SNE: 5.6 s with one
thread, 31.3 s with two, on a busy 2-core machine; see bench/bench_parametric.py).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.utils import check_random_state
from sklearn.utils.validation import check_is_fitted, validate_data
from threadpoolctl import threadpool_limits

from ._network import ACTIVATIONS, Architecture, OutputLoss, forward
from ._training import Schedule, train

#: Fewest rows on each side of a validation split; below that the split is skipped.
_MIN_SPLIT_ROWS = 2


class ParametricEmbedding(TransformerMixin, BaseEstimator):
    """Base of the parametric mappings; subclasses define ``__init__`` and ``_batch_loss``."""

    #: Whether ``transform`` returns coordinates in the units of the input distances.
    _data_units = True

    # Parameters every subclass takes; set by the subclass __init__.
    n_components: int
    hidden: tuple[int, ...]
    activation: str
    epochs: int
    batch_size: int
    learning_rate: float
    weight_decay: float
    validation_fraction: float
    patience: int
    random_state: Any

    def _batch_loss(self, T: np.ndarray) -> OutputLoss:
        """Loss of one minibatch from its target coordinates ``T`` (data / global scale)."""
        raise NotImplementedError

    def _check_params(self) -> None:
        def positive_int(name: str, value: Any) -> None:
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
                raise ValueError(f"{name} must be a positive integer, got {value!r}")

        positive_int("n_components", self.n_components)
        positive_int("epochs", self.epochs)
        positive_int("batch_size", self.batch_size)
        positive_int("patience", self.patience)
        for width in tuple(self.hidden):
            positive_int("each width in hidden", width)
        if self.activation not in ACTIVATIONS:
            raise ValueError(f"activation must be one of {', '.join(ACTIVATIONS)}, got {self.activation!r}")
        if not self.learning_rate > 0:
            raise ValueError(f"learning_rate must be > 0, got {self.learning_rate!r}")
        if not self.weight_decay >= 0:
            raise ValueError(f"weight_decay must be >= 0, got {self.weight_decay!r}")
        if not 0 <= self.validation_fraction < 1:
            raise ValueError(f"validation_fraction must be in [0, 1), got {self.validation_fraction!r}")

    def _split(self, n: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
        n_val = round(self.validation_fraction * n)
        if n_val < _MIN_SPLIT_ROWS or n - n_val < _MIN_SPLIT_ROWS:
            return np.arange(n), np.arange(0)
        order = rng.permutation(n)
        return np.sort(order[n_val:]), np.sort(order[:n_val])

    def fit(self, X: Any, y: object = None) -> ParametricEmbedding:
        """Train the network on ``X``.

        Parameters
        ----------
        X : array-like of shape (n, d)
            Feature coordinates (at least two rows).
        y : ignored

        Returns
        -------
        self

        Raises
        ------
        TrainingDiverged
            The loss became NaN or infinite; the message names the epoch and the value.
        """
        self._check_params()
        X = validate_data(self, X, dtype=np.float64, ensure_min_samples=2)
        seed = check_random_state(self.random_state).randint(np.iinfo(np.int32).max)
        split_rng, init_rng, batch_rng = (
            np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(3)
        )
        train_rows, val_rows = self._split(X.shape[0], split_rng)
        fitted = X[train_rows]
        self.mean_ = fitted.mean(axis=0)
        std = fitted.std(axis=0)
        std[~(std > np.finfo(np.float64).eps * np.abs(fitted).max(axis=0))] = 1.0
        self.std_ = std
        self.scale_ = float(np.sqrt(2.0 * fitted.var(axis=0).sum()))
        if not self.scale_ > 0:
            raise ValueError("all training rows are identical; an embedding needs at least two distinct rows")
        targets = (X - self.mean_) / self.scale_
        self.architecture_ = Architecture(
            (X.shape[1], *(int(w) for w in self.hidden), int(self.n_components)), self.activation
        )
        schedule = Schedule(
            int(self.epochs),
            int(self.batch_size),
            float(self.learning_rate),
            float(self.weight_decay),
            int(self.patience),
        )
        with threadpool_limits(limits=1, user_api="blas"):
            self.weights_, history = train(
                type(self).__name__,
                self.architecture_,
                self.architecture_.init(init_rng),
                (X - self.mean_) / self.std_,
                (train_rows, val_rows),
                lambda rows: self._batch_loss(targets[rows]),
                schedule,
                batch_rng,
            )
        self.loss_curve_ = np.asarray(history.loss)
        self.validation_curve_ = np.asarray(history.validation)
        self.n_epochs_ = len(history.loss)
        self.best_epoch_ = history.best_epoch
        self.n_validation_ = int(val_rows.size)
        return self

    def transform(self, X: Any) -> np.ndarray:
        """Map points through the trained network.

        Parameters
        ----------
        X : array-like of shape (n, d)
            Points with the features seen in :meth:`fit` (new points included).

        Returns
        -------
        ndarray of shape (n, n_components)
        """
        check_is_fitted(self, "weights_")
        X = validate_data(self, X, dtype=np.float64, reset=False)
        Y, _ = forward(self.architecture_, self.weights_, (X - self.mean_) / self.std_)
        return Y * self.scale_ if self._data_units else Y
