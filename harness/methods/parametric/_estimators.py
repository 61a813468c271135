"""The three parametric mappings: Sammon, metric MDS and t-SNE, each a trained network."""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy.spatial.distance import cdist

from ._base import ParametricEmbedding
from ._losses import STRESS_KINDS, joint_affinities, sammon_loss, stress_loss, tsne_loss
from ._network import OutputLoss

_COMMON_DOC = """
    n_components : int, default=2
        Output dimension.
    hidden : tuple of int, default=(128, 128)
        Width of each hidden layer; ``()`` makes the map affine (``Y = X W + b``).
    activation : {{"relu", "tanh", "softplus", "identity"}}, default="relu"
        Activation after every hidden layer (the output layer is linear).
    epochs : int, default={epochs}
        Passes over the training rows at most.
    batch_size : int, default={batch_size}
        Rows per minibatch; the loss is taken over the pairs inside each one.
        The rows are cut into ``floor(n / batch_size)`` near-equal minibatches.
    learning_rate : float, default={learning_rate}
        Adam step size (Kingma and Ba 2015; betas 0.9 and 0.999).
    weight_decay : float, default=0.0
        Coefficient of the penalty ``weight_decay / 2 * sum(W**2)`` over weight
        matrices (biases are not penalised).
    validation_fraction : float, default=0.1
        Share of rows held out to decide when to stop; 0 trains for all epochs.
        Skipped when either side of the split would have fewer than two rows.
    patience : int, default={patience}
        Epochs without a relative validation-loss drop of 1e-4 before stopping;
        the weights of the best validation epoch are kept.
    random_state : int, RandomState or None, default=None
        Seeds the validation split, the starting weights and the minibatch order.

    Attributes
    ----------
    weights_ : ndarray
        Flat vector of the trained weights.
    architecture_ : Architecture
        Layer sizes and activation.
    mean_, std_ : ndarray of shape (d,)
        Standardisation of the network input, learned on the training rows.
    scale_ : float
        Root mean squared distance between training rows; target distances are
        divided by it.
    loss_curve_, validation_curve_ : ndarray
        Mean minibatch loss and validation loss of each epoch.
    n_epochs_, best_epoch_ : int
        Epochs run and the epoch whose weights were kept.
    n_validation_ : int
        Rows held out for early stopping.
"""


class ParametricSammon(ParametricEmbedding):
    __doc__ = """Network trained on Sammon's stress (Sammon 1969) over the pairs of each minibatch.

    ``transform`` returns coordinates in the units of the input.

    Parameters
    ----------""" + _COMMON_DOC.format(epochs=300, batch_size=128, learning_rate="3e-3", patience=30)

    def __init__(
        self,
        n_components: int = 2,
        *,
        hidden: tuple[int, ...] = (128, 128),
        activation: str = "relu",
        epochs: int = 300,
        batch_size: int = 128,
        learning_rate: float = 3e-3,
        weight_decay: float = 0.0,
        validation_fraction: float = 0.1,
        patience: int = 30,
        random_state: Any = None,
    ) -> None:
        self.n_components = n_components
        self.hidden = hidden
        self.activation = activation
        self.epochs = epochs
        self.batch_size = batch_size
        self.learning_rate = learning_rate
        self.weight_decay = weight_decay
        self.validation_fraction = validation_fraction
        self.patience = patience
        self.random_state = random_state

    def _batch_loss(self, T: np.ndarray) -> OutputLoss:
        return sammon_loss(cdist(T, T))


class ParametricMDS(ParametricEmbedding):
    __doc__ = """Network trained on metric stress (Kruskal 1964) over the pairs of each minibatch.

    ``transform`` returns coordinates in the units of the input.

    Parameters
    ----------
    stress : {"raw", "kruskal"}, default="raw"
        ``"raw"``: raw stress divided by the sum of squared target distances of
        the minibatch; ``"kruskal"``: Kruskal's stress-1, normalised by the sum
        of squared embedded distances.""" + _COMMON_DOC.format(
        epochs=300, batch_size=128, learning_rate="3e-3", patience=30
    )

    def __init__(
        self,
        n_components: int = 2,
        *,
        stress: str = "raw",
        hidden: tuple[int, ...] = (128, 128),
        activation: str = "relu",
        epochs: int = 300,
        batch_size: int = 128,
        learning_rate: float = 3e-3,
        weight_decay: float = 0.0,
        validation_fraction: float = 0.1,
        patience: int = 30,
        random_state: Any = None,
    ) -> None:
        self.n_components = n_components
        self.stress = stress
        self.hidden = hidden
        self.activation = activation
        self.epochs = epochs
        self.batch_size = batch_size
        self.learning_rate = learning_rate
        self.weight_decay = weight_decay
        self.validation_fraction = validation_fraction
        self.patience = patience
        self.random_state = random_state

    def _check_params(self) -> None:
        super()._check_params()
        if self.stress not in STRESS_KINDS:
            raise ValueError(f"stress must be one of {', '.join(STRESS_KINDS)}, got {self.stress!r}")

    def _batch_loss(self, T: np.ndarray) -> OutputLoss:
        return stress_loss(cdist(T, T), self.stress)


class ParametricTSNE(ParametricEmbedding):
    __doc__ = """Network trained on the t-SNE objective KL(P || Q) within each minibatch.

    ``P`` is computed for every minibatch from its rows with the perplexity
    bisection of van der Maaten and Hinton (2008); ``Q`` uses a Student-t kernel
    with ``alpha`` degrees of freedom (van der Maaten 2009).  ``transform``
    returns coordinates in the units of the t-SNE map (they have no data units).

    Parameters
    ----------
    perplexity : float, default=30.0
        Effective number of neighbours, capped at ``batch_size - 1``.
    alpha : float or "auto", default="auto"
        Degrees of freedom of the Student-t kernel; ``"auto"`` means
        ``max(1, n_components - 1)`` (van der Maaten 2009): 1, the Cauchy
        kernel of ordinary t-SNE, for one or two output dimensions, and
        lighter tails as the dimension grows.""" + _COMMON_DOC.format(
        epochs=30, batch_size=300, learning_rate="1e-2", patience=10
    )

    _data_units = False

    def __init__(
        self,
        n_components: int = 2,
        *,
        perplexity: float = 30.0,
        alpha: float | str = "auto",
        hidden: tuple[int, ...] = (128, 128),
        activation: str = "relu",
        epochs: int = 30,
        batch_size: int = 300,
        learning_rate: float = 1e-2,
        weight_decay: float = 0.0,
        validation_fraction: float = 0.1,
        patience: int = 10,
        random_state: Any = None,
    ) -> None:
        self.n_components = n_components
        self.perplexity = perplexity
        self.alpha = alpha
        self.hidden = hidden
        self.activation = activation
        self.epochs = epochs
        self.batch_size = batch_size
        self.learning_rate = learning_rate
        self.weight_decay = weight_decay
        self.validation_fraction = validation_fraction
        self.patience = patience
        self.random_state = random_state

    @property
    def degrees_of_freedom(self) -> float:
        """The Student-t degrees of freedom in use (``alpha`` with ``"auto"`` resolved)."""
        if isinstance(self.alpha, str):
            return float(max(1, self.n_components - 1))
        return float(self.alpha)

    def _check_params(self) -> None:
        super()._check_params()
        if not (isinstance(self.perplexity, (int, float)) and self.perplexity > 0):
            raise ValueError(f"perplexity must be > 0, got {self.perplexity!r}")
        if isinstance(self.alpha, str) and self.alpha != "auto":
            raise ValueError(f"alpha must be 'auto' or a number > 0, got {self.alpha!r}")
        if not isinstance(self.alpha, str) and not self.alpha > 0:
            raise ValueError(f"alpha must be 'auto' or a number > 0, got {self.alpha!r}")

    def _batch_loss(self, T: np.ndarray) -> OutputLoss:
        P = joint_affinities(cdist(T, T, "sqeuclidean"), float(self.perplexity))
        return tsne_loss(P, self.degrees_of_freedom)
