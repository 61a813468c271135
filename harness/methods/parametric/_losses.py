"""Losses over the pairs of one minibatch, each with its gradient wrt the outputs.

Every loss is built from a minibatch's *targets* (input distances, or the
affinities ``P`` of t-SNE) and returned as a function ``loss(Y) -> (value, dY)``
of the minibatch's outputs ``Y`` (m, q).  Matrices are dense m x m: a minibatch
holds a few hundred points.

Embedded distances are smoothed as ``e_ij = sqrt(|y_i - y_j|^2 + EPS)`` so that
the distance losses stay differentiable when two outputs coincide; ``EPS`` is
negligible next to target distances scaled to a mean of order one.
"""

from __future__ import annotations

import numpy as np
from scipy.spatial.distance import cdist

from ._network import OutputLoss

EPS = 1e-12
STRESS_KINDS = ("raw", "kruskal")


def _embedded(Y: np.ndarray) -> np.ndarray:
    S = cdist(Y, Y, "sqeuclidean")
    return np.sqrt(S + EPS)


def _pair_gradient(Y: np.ndarray, A: np.ndarray) -> np.ndarray:
    """``dY_i = sum_j A_ij (y_i - y_j)`` for a symmetric ``A`` with zero diagonal."""
    return A.sum(axis=1)[:, None] * Y - A @ Y


def sammon_loss(D: np.ndarray) -> OutputLoss:
    """Sammon's stress (Sammon 1969) of the minibatch with target distances ``D``.

    ``E = (1 / sum_{i<j} d_ij) * sum_{i<j} (d_ij - e_ij)^2 / d_ij``; pairs at
    target distance zero get weight zero (as in :mod:`harness.methods.sammon`).
    """
    off = ~np.eye(D.shape[0], dtype=bool)
    total = D[off].sum() / 2.0
    W = np.zeros_like(D)
    positive = off & (D > 0)
    W[positive] = 1.0 / D[positive]

    def loss(Y: np.ndarray) -> tuple[float, np.ndarray]:
        if total <= 0:
            return 0.0, np.zeros_like(Y)
        E = _embedded(Y)
        R = D - E
        value = float((W * R * R).sum() / (2.0 * total))
        G = -2.0 * W * R / total  # dE / de_ij for the unordered pair
        return value, _pair_gradient(Y, G / E)

    return loss


def stress_loss(D: np.ndarray, kind: str = "raw") -> OutputLoss:
    """Metric stress (Kruskal 1964) of the minibatch with target distances ``D``.

    ``kind="raw"``: raw stress ``sum_{i<j} (d_ij - e_ij)^2`` divided by the
    constant ``sum_{i<j} d_ij^2``, so minibatches of any size weigh alike.
    ``kind="kruskal"``: Kruskal's stress-1 ``sqrt(sum (d_ij - e_ij)^2 / sum e_ij^2)``
    with the data distances as the disparities (metric scaling).
    """
    off = ~np.eye(D.shape[0], dtype=bool)
    total = float((D[off] ** 2).sum() / 2.0)

    def loss(Y: np.ndarray) -> tuple[float, np.ndarray]:
        if total <= 0:
            return 0.0, np.zeros_like(Y)
        E = _embedded(Y)
        R = np.where(off, D - E, 0.0)
        raw = float((R * R).sum() / 2.0)
        if kind == "raw":
            G = -2.0 * R / total
            return raw / total, _pair_gradient(Y, G / E)
        spread = float((np.where(off, E, 0.0) ** 2).sum() / 2.0)
        value = np.sqrt(raw / spread)
        if value == 0:
            return 0.0, np.zeros_like(Y)
        G = -(R + value**2 * E) / (value * spread)
        return float(value), _pair_gradient(Y, np.where(off, G / E, 0.0))

    return loss


#: Largest Newton move of ``log beta`` in one step: the entropy is flat far
#: from the root, where a full Newton step would jump out of any sensible range.
_MAX_LOG_STEP = 2.0


def _row_entropy(
    shifted: np.ndarray, beta: np.ndarray, rows: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Entropy of rows ``p_{j|i} ~ exp(-beta_i s_ij)``, ``j != i``, and its slope in ``log beta_i``.

    ``shifted`` holds the given ``rows`` of the distance matrix, each with its
    smallest off-diagonal distance subtracted, so every row keeps at least one
    weight of one and ``Z >= 1``.
    """
    K = np.exp(-beta[:, None] * shifted)
    K[np.arange(rows.size), rows] = 0.0
    Z = K.sum(axis=1)
    mean_s = (K * shifted).sum(axis=1) / Z
    var_s = (K * shifted**2).sum(axis=1) / Z - mean_s**2
    return np.log(Z) + beta * mean_s, -(beta**2) * np.maximum(var_s, 0.0), K


def conditional_affinities(
    S: np.ndarray, perplexity: float, tol: float = 1e-5, max_iter: int = 100
) -> np.ndarray:
    """Rows ``p_{j|i}`` of Gaussian affinities with the given perplexity.

    Finds each row's precision ``beta_i = 1 / (2 sigma_i^2)`` such that the
    entropy of ``p_{.|i}`` is ``log(perplexity)`` (van der Maaten and Hinton
    2008, section 2).  The entropy falls monotonically in ``beta``; each step
    is a Newton step in ``log beta`` (at most ``_MAX_LOG_STEP``) kept inside the
    bracket found so far, and a bisection step when Newton would leave it.
    Rows stop as soon as they are within ``tol``.

    Parameters
    ----------
    S : ndarray of shape (m, m)
        Squared input distances of the minibatch.
    perplexity : float
        Target perplexity; capped at ``m - 1``, the most a row can reach.
    tol : float
        Accepted absolute error of the entropy (nats).
    max_iter : int
        Steps at most.
    """
    m = S.shape[0]
    target = np.log(min(perplexity, m - 1.0))
    off = ~np.eye(m, dtype=bool)
    nearest = np.where(off, S, np.inf).min(axis=1, keepdims=True)
    shifted = np.where(off, S - nearest, 0.0)
    mean_sq = float(shifted[off].mean()) if m > 1 else 0.0
    log_beta = np.full(m, -np.log(mean_sq) if mean_sq > 0 else 0.0)
    lo = np.full(m, -np.inf)
    hi = np.full(m, np.inf)
    active = np.arange(m)
    for _ in range(max_iter):
        H, slope, _ = _row_entropy(shifted[active], np.exp(log_beta[active]), active)
        err = H - target
        moving = np.abs(err) >= tol
        active, err, slope = active[moving], err[moving], slope[moving]
        if not active.size:
            break
        b = log_beta[active]
        wide = err > 0  # entropy too high: sharpen (raise beta)
        lo[active] = np.where(wide, b, lo[active])
        hi[active] = np.where(wide, hi[active], b)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            newton = b - np.clip(err / slope, -_MAX_LOG_STEP, _MAX_LOG_STEP)
        low, high = lo[active], hi[active]
        bisect = np.where(
            np.isinf(high),
            b + _MAX_LOG_STEP,
            np.where(np.isinf(low), b - _MAX_LOG_STEP, (low + high) / 2),
        )
        inside = np.isfinite(newton) & (newton > low) & (newton < high)
        log_beta[active] = np.where(inside, newton, bisect)
    _, _, K = _row_entropy(shifted, np.exp(log_beta), np.arange(m))
    return K / K.sum(axis=1, keepdims=True)


def joint_affinities(S: np.ndarray, perplexity: float) -> np.ndarray:
    """Symmetrised affinities ``p_ij = (p_{j|i} + p_{i|j}) / 2m`` of one minibatch."""
    C = conditional_affinities(S, perplexity)
    return (C + C.T) / (2.0 * S.shape[0])


def tsne_loss(P: np.ndarray, alpha: float = 1.0) -> OutputLoss:
    """Kullback-Leibler divergence KL(P || Q) of the minibatch.

    ``Q`` uses a Student-t kernel with ``alpha`` degrees of freedom,
    ``w_ij = (1 + |y_i - y_j|^2 / alpha)^(-(alpha + 1) / 2)``, ``q_ij = w_ij / sum_{k != l} w_kl``
    (van der Maaten 2009; ``alpha = 1`` is the Cauchy kernel of van der Maaten
    and Hinton 2008).  Gradient:
    ``dC/dy_i = (2 (alpha + 1) / alpha) sum_j (p_ij - q_ij) (1 + |y_i - y_j|^2 / alpha)^-1 (y_i - y_j)``.
    """
    off = ~np.eye(P.shape[0], dtype=bool)
    keep = off & (P > 0)
    entropy_part = float((P[keep] * np.log(P[keep])).sum())

    def loss(Y: np.ndarray) -> tuple[float, np.ndarray]:
        S = cdist(Y, Y, "sqeuclidean")
        base = np.where(off, 1.0 / (1.0 + S / alpha), 0.0)
        log_w = np.where(off, 0.5 * (alpha + 1.0) * np.log(base, where=off, out=np.zeros_like(base)), 0.0)
        W = np.exp(log_w) * off
        total = W.sum()
        Q = W / total
        value = entropy_part - float((P[keep] * (log_w[keep] - np.log(total))).sum())
        A = (2.0 * (alpha + 1.0) / alpha) * (P - Q) * base
        return value, _pair_gradient(Y, A)

    return loss
