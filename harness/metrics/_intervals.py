"""95% intervals of neighbourhood measures estimated from sampled query points.

A sampled local measure is the mean of ``m`` per-point terms drawn without
replacement from the ``N`` points.  Every such term lies in a known range
``[low, high]`` (``[0, 1]`` for trustworthiness, continuity, k-NN recall and
both MRREs; shifted ranges for LCMC and the R_NX area) and is built from
neighbour sub-terms; ``c`` (:func:`term_range`) is the inverse of the largest
share of the range one neighbour can move it by (``c = k`` for recall).

The normal interval ``mean ± 1.96 sd / sqrt(m)`` fails near the ends of the
range: terms there are skewed, the sample sd is often 0 and the interval
collapses to a point (``0 ± 0``).  Instead the term mean is rescaled to
``[0, 1]`` and given the Wilson score interval (Wilson 1927,
J. Am. Stat. Assoc. 22:209-212) on an effective count, as survey statistics
does for proportions from clustered samples (Kish 1965, design effect;
Korn & Graubard 1998, Survey Methodology 24, effective sample size
``n* = p(1-p) / var(p)``):

* ``n_eff = m * p(1-p) / s^2``, the count of independent Bernoulli trials
  whose binomial variance equals the observed variance of the mean, so away
  from the ends the interval is the normal one;
* never below ``m``: a term in ``[0, 1]`` with mean ``p`` has variance at most
  ``p(1-p)`` (Bhatia & Davis 2000), so each point is worth at least one trial;
* near an end of the range, where the sampled terms are effectively fewer than
  :data:`MIN_OFF_END` away from that end (:func:`off_end`), the sample sd
  rests on a handful of points and misses rare large terms, so ``n_eff`` is at
  most ``c m``: each point is credited with no more than its ``c`` neighbour
  sub-terms as independent trials (for
  rare events ``var ~ (largest sub-term share) * p``, which is this count);
  in particular an all-equal sample (``s = 0``, where the normal interval
  collapses to ``0 ± 0``) gets the bound Wilson gives ``c m`` trials;
* the finite-population correction divides the count by ``1 - m / N``
  (the variance of a mean under sampling without replacement, Cochran 1977, ch. 2).
"""

from __future__ import annotations

from collections.abc import Mapping
from statistics import NormalDist

import numpy as np

from ._local import PER_K

#: Two-sided 95% normal quantile.
Z95 = NormalDist().inv_cdf(0.975)


def wilson_interval(p: float, count: float, z: float = Z95) -> tuple[float, float]:
    """Wilson score interval of a proportion ``p`` observed on ``count`` trials (Wilson 1927).

    ``count`` may be fractional (an effective count).
    """
    p = min(max(p, 0.0), 1.0)
    z2 = z * z
    denom = 1.0 + z2 / count
    centre = (p + z2 / (2.0 * count)) / denom
    half = z / denom * np.sqrt(p * (1.0 - p) / count + z2 / (4.0 * count * count))
    # At p = 0 (or 1) the bound is exactly 0 (or 1); rounding must not leave 1e-18.
    lower = 0.0 if p <= 0.0 else max(0.0, float(centre - half))
    upper = 1.0 if p >= 1.0 else min(1.0, float(centre + half))
    return lower, upper


#: Fewest effective terms off the nearer end of the range for the sample sd to be trusted (the
#: "at least 10 successes and 10 failures" rule of thumb for normal approximations to a
#: proportion; common practice, no source).
MIN_OFF_END = 10


def off_end(values: np.ndarray, p: float) -> float:
    """Kish's effective number ``(sum d)^2 / sum d^2`` of the distances ``d`` of terms in [0, 1]
    from the end of the range nearer the mean ``p`` (Kish 1965): many tiny departures count
    for less than a few large ones, which are the ones a small sample misses."""
    d = values if p <= 0.5 else 1.0 - values
    total, squares = float(np.sum(d)), float(np.sum(d * d))
    return total * total / squares if squares > 0.0 else 0.0


def effective_count(p: float, sd: float, m: int, trials: float, off: float) -> float:
    """Effective number of Bernoulli trials behind a mean ``p`` of ``m`` terms in [0, 1] (see module).

    ``off`` is :func:`off_end` of the terms.
    """
    most = max(1.0, trials) * m
    if sd <= 0.0 or not np.isfinite(sd):
        return most
    observed = max(float(m), m * p * (1.0 - p) / (sd * sd))
    return observed if off >= MIN_OFF_END else min(most, observed)


def term_range(key: str, n: int, k_auc: int) -> tuple[float, float, float]:
    """``(low, high, sub-terms)`` of the per-point term of a local measure column.

    ``sub-terms`` is ``1 / (largest share of the range one neighbour slot can
    move the term by)``: ``k`` for recall and LCMC (each of the k neighbours is
    worth 1/k), about ``k`` for trustworthiness and continuity (one neighbour's
    penalty is at most ``2(n-1-k) / (k(2n-3k-1))``), ``H_k / (n-2)`` for the MRREs
    (the first neighbour's error can reach ``(n-2) / H_k``) and, for the R_NX
    area, the inverse of what a first neighbour kept at every K adds.

    Parameters
    ----------
    key : str
        ``trustworthiness@10``, ``lcmc@5``, ``rnx_auc``, ``rnx_auc@20`` ...
    n : int
        Number of points.
    k_auc : int
        Largest K of an ``rnx_auc`` column without ``@K``.
    """
    stem, _, k_text = key.partition("@")
    k = int(k_text) if k_text else k_auc
    if stem in ("knn_recall", "lcmc"):
        # LCMC(k) = Q_NX(k) - k / (n - 1) (Chen & Buja 2009): a shifted share in [0, 1].
        shift = k / (n - 1.0) if stem == "lcmc" else 0.0
        return -shift, 1.0 - shift, float(k)
    if stem in ("trustworthiness", "continuity"):
        return 0.0, 1.0, k * (2.0 * n - 3.0 * k - 1.0) / (2.0 * (n - 1.0 - k))
    if stem in ("mrre_data", "mrre_embedding"):
        ell = np.arange(1, k + 1)
        return 0.0, 1.0, float(np.sum(np.abs(n - 2.0 * ell) / ell) / (n - 2.0))
    if stem == "rnx_auc":
        # R_NX(K) = ((n-1) Q - K) / (n-1-K) is lowest at Q = 0; the area is a 1/K-weighted mean of it.
        big_k = np.arange(1, k + 1)
        weights = 1.0 / big_k / np.sum(1.0 / big_k)
        low = float(np.sum(weights * -big_k / (n - 1.0 - big_k)))
        first = float(np.sum(weights * (n - 1.0) / (big_k * (n - 1.0 - big_k))))
        return low, 1.0, (1.0 - low) / first
    raise ValueError(f"no interval rule for the local measure column {key!r}")


def term_interval(
    values: np.ndarray, low: float, high: float, trials: float, population: int
) -> tuple[float, float, float]:
    """Mean of sampled per-point terms in ``[low, high]`` and its 95% Wilson interval.

    Parameters
    ----------
    values : ndarray
        Terms of the ``m`` sampled points.
    low, high : float
        Range every term lies in.
    trials : float
        Neighbour sub-terms per point: the most trials a point is credited with.
    population : int
        Number of points the sample was drawn from without replacement.

    Returns
    -------
    mean, lower, upper : float
    """
    m = len(values)
    mean = float(np.mean(values))
    width = high - low
    p = min(max((mean - low) / width, 0.0), 1.0)
    # Equal terms (up to rounding of the shift of LCMC or R_NX) have no spread to measure.
    equal = m < 2 or float(np.ptp(values)) <= 1e-12 * width
    sd = 0.0 if equal else float(np.std(values, ddof=1)) / width
    if p < 1e-12 or p > 1.0 - 1e-12:
        p = round(p)
    count = effective_count(p, sd, m, trials, off_end((values - low) / width, p))
    kept = 1.0 - m / population
    if kept <= 0.0:
        return mean, mean, mean
    lo, hi = wilson_interval(p, count / kept)
    # The range's own ends, not low + width * 1 (which may round past them); the mean is always inside.
    lower = low if lo <= 0.0 else low + width * lo
    upper = high if hi >= 1.0 else low + width * hi
    return mean, min(lower, mean), max(upper, mean)


def _column_order(key: str) -> tuple[int, int]:
    """Per-k measures in the order of ``PER_K``, each by k; the others after them."""
    stem, _, k = key.partition("@")
    place = PER_K.index(stem) if stem in PER_K else len(PER_K)
    return place, int(k) if k else 0


def local_estimates(
    terms: Mapping[str, np.ndarray], n: int, k_auc: int, sampled: bool
) -> tuple[dict[str, float], dict[str, tuple[float, float]]]:
    """Values of every local measure column and, when ``sampled``, their 95% intervals.

    Parameters
    ----------
    terms : mapping of str to ndarray
        Per-point terms by measure column.
    n : int
        Number of points (the population of the sample).
    k_auc : int
        Largest K of ``rnx_auc``.
    sampled : bool
        The terms come from a sample of query points; otherwise they cover
        every point and the values are exact (no interval).

    Returns
    -------
    values : dict of str to float
    intervals : dict of str to (lower, upper)
    """
    values: dict[str, float] = {}
    intervals: dict[str, tuple[float, float]] = {}
    for key in sorted(terms, key=_column_order):
        t = terms[key]
        if not sampled:
            values[key] = float(np.mean(t))
            continue
        low, high, trials = term_range(key, n, k_auc)
        values[key], lo, hi = term_interval(t, low, high, trials, n)
        intervals[key] = (lo, hi)
    return values, intervals
