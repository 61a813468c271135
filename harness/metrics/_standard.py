"""Put both spaces on a standard footing before any distance is computed.

Every measure is invariant under translation and uniform scaling of either
space, but the arithmetic is not: the neighbourhood engine's squared distances
``|a|^2 + |b|^2 - 2 a.b`` lose every digit below ``ulp(|a|^2)`` when the data
sit far from the origin, and squares of coordinates near 1e160 overflow while
those near 1e-160 underflow.  So each space is first

* centred on its coordinate-wise *lower median* (a value the column holds,
  picked by position, so a translated column yields the translated value), and
* multiplied by a power of two chosen so that the largest absolute coordinate
  lies in [0.5, 1).

Multiplying by a power of two is exact in binary floating point (short of
overflow or underflow, which the choice of the power rules out), so scaling the
input by any power of two gives bit-identical standardised numbers, hence
identical distances, ranks and measures.  Subtracting the median is exact
whenever the exact difference is a float, which holds for every translation
that was itself exact (the translated data are the same points); the centred
coordinates are then bit-identical too.  A translation that rounds the data
(``X + 1e12`` keeps only about 4 digits after the point) changes the points
themselves, and no arithmetic can recover the lost digits.

A distance matrix has no origin; it is only scaled by a power of two.
"""

from __future__ import annotations

import numpy as np


def _power_of_two_scale(values: np.ndarray) -> np.ndarray:
    """``values`` times the power of two that puts ``max |values|`` in [0.5, 1) (unchanged if all zero)."""
    top = float(np.max(np.abs(values), initial=0.0))
    if top == 0.0:
        return values
    _, exponent = np.frexp(top)
    return np.ldexp(values, -int(exponent))


def standard_points(points: np.ndarray) -> np.ndarray:
    """Coordinates centred on the column-wise lower median and scaled by a power of two.

    Parameters
    ----------
    points : ndarray of shape (n, d), finite float64

    Returns
    -------
    ndarray of shape (n, d)
        New array; the largest absolute value lies in [0.5, 1) unless all
        points coincide (then all zeros).
    """
    n = points.shape[0]
    middle = (n - 1) // 2
    centre = np.partition(points, middle, axis=0)[middle]
    return _power_of_two_scale(points - centre)


def standard_distances(matrix: np.ndarray) -> np.ndarray:
    """A distance matrix scaled by the power of two that puts its largest entry in [0.5, 1).

    Parameters
    ----------
    matrix : ndarray of shape (n, n), finite, non-negative

    Returns
    -------
    ndarray of shape (n, n)
    """
    return _power_of_two_scale(matrix)
