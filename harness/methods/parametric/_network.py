"""A small multilayer perceptron in numpy: forward pass, backpropagation, Adam.

The network maps standardised inputs ``Z`` (n, d) to outputs ``Y`` (n, q)
through hidden layers ``h_l = act(h_{l-1} W_l + b_l)`` and a linear output
layer.  Weights live in one flat float64 vector so that the optimiser, the
finite-difference gradient checks and the "keep the best weights" copy of early
stopping all handle a single array.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

#: Hidden-layer activations: value and derivative written in terms of the
#: pre-activation ``a`` and the output ``h`` (whichever is cheaper).
ACTIVATIONS = ("relu", "tanh", "softplus", "identity")


def _activate(name: str, a: np.ndarray) -> np.ndarray:
    if name == "relu":
        return np.maximum(a, 0.0)
    if name == "tanh":
        return np.tanh(a)
    if name == "softplus":
        return np.logaddexp(0.0, a)
    return a


def _derivative(name: str, a: np.ndarray, h: np.ndarray) -> np.ndarray | float:
    if name == "relu":
        return (a > 0).astype(a.dtype)
    if name == "tanh":
        return 1.0 - h * h
    if name == "softplus":
        # d/da log(1 + e^a) = sigmoid(a), written with tanh to avoid overflow
        return 0.5 * (1.0 + np.tanh(0.5 * a))
    return 1.0


@dataclass(frozen=True)
class Architecture:
    """Layer sizes and hidden activation of a network.

    Parameters
    ----------
    sizes : tuple of int
        ``(n_inputs, hidden_1, ..., hidden_k, n_outputs)``; with no hidden
        layer the network is the affine map ``Y = Z W + b``.
    activation : str
        One of :data:`ACTIVATIONS`, applied after every hidden layer.
    """

    sizes: tuple[int, ...]
    activation: str

    @property
    def shapes(self) -> list[tuple[int, int]]:
        """Shape of each weight matrix."""
        return list(zip(self.sizes[:-1], self.sizes[1:], strict=True))

    @property
    def n_weights(self) -> int:
        """Length of the flat weight vector (matrices and biases)."""
        return sum(a * b + b for a, b in self.shapes)

    def unpack(self, theta: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
        """Views ``(W, b)`` of each layer into the flat vector ``theta``."""
        layers = []
        at = 0
        for a, b in self.shapes:
            W = theta[at : at + a * b].reshape(a, b)
            at += a * b
            layers.append((W, theta[at : at + b]))
            at += b
        return layers

    def weight_mask(self) -> np.ndarray:
        """True at matrix entries, False at biases (weight decay skips biases)."""
        mask = np.zeros(self.n_weights, dtype=bool)
        for W, _ in self.unpack(mask):
            W[...] = True
        return mask

    def init(self, rng: np.random.Generator) -> np.ndarray:
        """Random starting weights; biases start at zero.

        He et al. (2015) scaling ``sqrt(2 / fan_in)`` for relu and softplus,
        Glorot and Bengio (2010) ``sqrt(1 / fan_in)`` otherwise; the output
        layer always uses the latter.
        """
        theta = np.zeros(self.n_weights)
        layers = self.unpack(theta)
        for i, (W, _) in enumerate(layers):
            fan_in = W.shape[0]
            gain = 2.0 if self.activation in ("relu", "softplus") and i < len(layers) - 1 else 1.0
            W[...] = rng.standard_normal(W.shape) * np.sqrt(gain / fan_in)
        return theta


def forward(arch: Architecture, theta: np.ndarray, Z: np.ndarray) -> tuple[np.ndarray, list[np.ndarray]]:
    """Outputs of the network and what backpropagation needs.

    Returns
    -------
    Y : ndarray of shape (n, q)
    cache : list of ndarray
        Input of every layer followed by the pre-activation of every hidden layer.
    """
    layers = arch.unpack(theta)
    inputs = [Z]
    pre = []
    h = Z
    for W, b in layers[:-1]:
        a = h @ W + b
        h = _activate(arch.activation, a)
        pre.append(a)
        inputs.append(h)
    W, b = layers[-1]
    return h @ W + b, inputs + pre


def backward(arch: Architecture, theta: np.ndarray, cache: list[np.ndarray], dY: np.ndarray) -> np.ndarray:
    """Gradient of a loss with respect to ``theta`` given its gradient ``dY`` wrt the outputs."""
    layers = arch.unpack(theta)
    n_layers = len(layers)
    inputs, pre = cache[:n_layers], cache[n_layers:]
    grad = np.zeros_like(theta)
    g_layers = arch.unpack(grad)
    delta = dY
    for i in range(n_layers - 1, -1, -1):
        W, _ = layers[i]
        gW, gb = g_layers[i]
        gW[...] = inputs[i].T @ delta
        gb[...] = delta.sum(axis=0)
        if i > 0:
            delta = (delta @ W.T) * _derivative(arch.activation, pre[i - 1], inputs[i])
    return grad


class Adam:
    """Adam update (Kingma and Ba 2015) on a flat parameter vector.

    Parameters
    ----------
    size : int
        Number of parameters.
    learning_rate : float
        Step size ``alpha``.
    beta1, beta2, eps : float
        Decay rates of the moment estimates and the denominator guard; the
        defaults are the paper's (0.9, 0.999, 1e-8).
    """

    def __init__(
        self, size: int, learning_rate: float, beta1: float = 0.9, beta2: float = 0.999, eps: float = 1e-8
    ) -> None:
        self.learning_rate = learning_rate
        self.beta1, self.beta2, self.eps = beta1, beta2, eps
        self.m = np.zeros(size)
        self.v = np.zeros(size)
        self.t = 0

    def step(self, theta: np.ndarray, grad: np.ndarray) -> None:
        """Move ``theta`` in place by one bias-corrected Adam step."""
        self.t += 1
        self.m *= self.beta1
        self.m += (1.0 - self.beta1) * grad
        self.v *= self.beta2
        self.v += (1.0 - self.beta2) * grad * grad
        m_hat = self.m / (1.0 - self.beta1**self.t)
        v_hat = self.v / (1.0 - self.beta2**self.t)
        theta -= self.learning_rate * m_hat / (np.sqrt(v_hat) + self.eps)


#: ``loss(Y) -> (value, dvalue/dY)`` for one minibatch.
OutputLoss = Callable[[np.ndarray], tuple[float, np.ndarray]]


def network_loss(
    arch: Architecture, theta: np.ndarray, Z: np.ndarray, loss: OutputLoss
) -> tuple[float, np.ndarray]:
    """Value and gradient wrt ``theta`` of ``loss(f_theta(Z))``."""
    Y, cache = forward(arch, theta, Z)
    value, dY = loss(Y)
    return value, backward(arch, theta, cache, dY)
