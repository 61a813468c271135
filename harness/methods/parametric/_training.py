"""Minibatch training of a network on a pair loss, with early stopping on a validation split."""

from __future__ import annotations

import logging
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from ._network import Adam, Architecture, OutputLoss, forward, network_loss

logger = logging.getLogger(__name__)

#: Relative drop of the validation loss that counts as an improvement (common practice, no source).
_IMPROVEMENT = 1e-4

#: ``targets(rows) -> loss`` builds the loss of the minibatch made of the given rows.
BatchLoss = Callable[[np.ndarray], OutputLoss]


class TrainingDiverged(FloatingPointError):
    """The loss or its gradient became NaN or infinite during training."""


@dataclass(frozen=True)
class Schedule:
    """How long and how fast to train."""

    epochs: int
    batch_size: int
    learning_rate: float
    weight_decay: float
    patience: int


@dataclass
class History:
    """What training did: loss per epoch, validation loss per epoch, the epoch kept."""

    loss: list[float] = field(default_factory=list)
    validation: list[float] = field(default_factory=list)
    best_epoch: int = 0


def batches(rows: np.ndarray, batch_size: int, rng: np.random.Generator | None) -> list[np.ndarray]:
    """Split ``rows`` (shuffled when ``rng`` is given) into ``floor(n / batch_size)`` near-equal parts.

    Every part holds at least ``batch_size`` rows (or all of them), so no
    minibatch is too small to have pairs.
    """
    if not rows.size:
        return []
    order = rows if rng is None else rng.permutation(rows)
    count = max(1, len(order) // batch_size)
    return np.array_split(order, count)


def _penalised(
    arch: Architecture, theta: np.ndarray, Z: np.ndarray, loss: OutputLoss, decay: float, mask: np.ndarray
) -> tuple[float, np.ndarray]:
    value, grad = network_loss(arch, theta, Z, loss)
    if decay > 0:
        value += 0.5 * decay * float(np.sum(theta[mask] ** 2))
        grad = grad + decay * np.where(mask, theta, 0.0)
    return value, grad


def _fail(name: str, epoch: int, what: str, value: float) -> TrainingDiverged:
    return TrainingDiverged(
        f"{name}: training diverged at epoch {epoch}: {what} {value!r}; "
        f"lower learning_rate or check the input scale"
    )


def _validation_loss(
    arch: Architecture, theta: np.ndarray, Z: np.ndarray, losses: list[tuple[np.ndarray, OutputLoss]]
) -> float:
    return float(np.mean([loss(forward(arch, theta, Z[rows])[0])[0] for rows, loss in losses]))


def train(
    name: str,
    arch: Architecture,
    theta: np.ndarray,
    Z: np.ndarray,
    split: tuple[np.ndarray, np.ndarray],
    batch_loss: BatchLoss,
    schedule: Schedule,
    rng: np.random.Generator,
) -> tuple[np.ndarray, History]:
    """Train ``theta`` by minibatch Adam; return the weights kept and the history.

    Parameters
    ----------
    name : str
        Estimator name for messages.
    arch, theta : Architecture, ndarray
        The network and its starting weights (not modified).
    Z : ndarray of shape (n, d)
        Standardised inputs of all fitted points.
    split : (train_rows, validation_rows)
        Row indices into ``Z``; no validation rows means no early stopping.
    batch_loss : callable
        Builds a minibatch's loss from its rows.
    schedule : Schedule
    rng : Generator
        Shuffles the minibatches of every epoch.

    Raises
    ------
    TrainingDiverged
        A minibatch loss, a gradient or the validation loss is not finite.
    """
    theta = theta.copy()
    train_rows, val_rows = split
    mask = arch.weight_mask()
    adam = Adam(theta.size, schedule.learning_rate)
    val_losses = [(rows, batch_loss(rows)) for rows in batches(val_rows, schedule.batch_size, None)]
    history = History()
    best, best_theta, waited = np.inf, theta.copy(), 0
    for epoch in range(1, schedule.epochs + 1):
        values = []
        for rows in batches(train_rows, schedule.batch_size, rng):
            value, grad = _penalised(arch, theta, Z[rows], batch_loss(rows), schedule.weight_decay, mask)
            if not np.isfinite(value):
                raise _fail(name, epoch, "loss", value)
            if not np.all(np.isfinite(grad)):
                raise _fail(name, epoch, "gradient not finite at loss", value)
            adam.step(theta, grad)
            values.append(value)
        history.loss.append(float(np.mean(values)))
        if not val_rows.size:
            continue
        current = _validation_loss(arch, theta, Z, val_losses)
        if not np.isfinite(current):
            raise _fail(name, epoch, "validation loss", current)
        history.validation.append(current)
        if current < best - _IMPROVEMENT * abs(best) or not np.isfinite(best):
            best, best_theta, waited, history.best_epoch = current, theta.copy(), 0, epoch
            continue
        waited += 1
        if waited >= schedule.patience:
            logger.debug("%s: early stop at epoch %d (best %d)", name, epoch, history.best_epoch)
            break
    if not val_rows.size:
        history.best_epoch = len(history.loss)
        return theta, history
    return best_theta, history
