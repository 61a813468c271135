"""Checks on bytes read back from disk: content digests, sealed JSON documents, measure ranges.

Whatever foldbench reuses (a cached embedding, a cell record, a baseline's
scores) is verified before use: a document carries the SHA-256 of its own
content (:func:`seal`), an array is compared with the digest and shape
recorded beside it (:func:`array_problem`), and a measure value must be a
finite number inside the measure's range (:func:`value_problem`).  A failed
check is a short reason (a string); callers decide whether that means
"compute again" or "refuse with one line".
"""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from ..metrics import measure_stem
from .atomic import jsonable

#: Version of the sealed formats (cell records, cache entries); bump when their layout changes.
FORMAT = 2

_INF = math.inf

#: Closed range of each measure's values.  Sources: trustworthiness and continuity are
#: normalised to [0, 1] (Venna and Kaski 2001); MRRE is normalised to [0, 1] (Lee and
#: Verleysen 2009); LCMC = Q_NX(k) - k/(n-1) with Q_NX in [0, 1] (Chen and Buja 2009);
#: R_NX(K) <= 1, so its weighted mean rnx_auc is too, and it has no finite lower bound
#: for K near n (Lee, Peluffo-Ordonez and Verleysen 2015); stress-1 and Sammon stress
#: with the best uniform scaling are at most their value at scale 0, which is 1
#: (Kruskal 1964, Sammon 1969, with our scale-optimal forms); Spearman correlations
#: and silhouette widths lie in [-1, 1] (Spearman 1904, Rousseeuw 1987); an accuracy
#: and a recall are fractions; times and memory are not negative.
MEASURE_RANGES: dict[str, tuple[float, float]] = {
    "trustworthiness": (0.0, 1.0),
    "continuity": (0.0, 1.0),
    "knn_recall": (0.0, 1.0),
    "mrre_data": (0.0, 1.0),
    "mrre_embedding": (0.0, 1.0),
    "lcmc": (-1.0, 1.0),
    "rnx_auc": (-_INF, 1.0),
    "stress": (0.0, 1.0),
    "sammon_stress": (0.0, 1.0),
    "shepard_spearman": (-1.0, 1.0),
    "knn_accuracy": (0.0, 1.0),
    "silhouette": (-1.0, 1.0),
    "latent_spearman": (-1.0, 1.0),
    "fit_seconds": (0.0, _INF),
    "fit_peak_mb": (0.0, _INF),
    "score_seconds": (0.0, _INF),
}

# a held-out measure has the range of its in-sample twin; placement is a recall, an accuracy a fraction
MEASURE_RANGES.update(
    {f"heldout_{k}": v for k, v in list(MEASURE_RANGES.items()) if not k.endswith(("_seconds", "_mb"))}
)
MEASURE_RANGES.update({"heldout_placement": (0.0, 1.0), "heldout_knn_accuracy": (0.0, 1.0)})

#: Rounding slack at the ends of a range (values are sums of floats).
_SLACK = 1e-9


def measure_range(column: str) -> tuple[float, float]:
    """The closed range of a measure column (``trustworthiness@10``); half-widths are >= 0."""
    if column.endswith(("_ci_low", "_ci_high")):
        # bounds of a cell's 95% interval; a jackknife interval may reach past the measure's range
        return (-_INF, _INF)
    return MEASURE_RANGES.get(measure_stem(column), (-_INF, _INF))


def value_problem(column: str, value: Any, *, missing_ok: bool = True) -> str | None:
    """Why ``value`` cannot be a value of measure ``column``, or ``None`` when it can.

    ``None`` and NaN mean "not measured" and pass when ``missing_ok``.
    """
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return None if missing_ok else f"{column} is empty"
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        return f"{column} is {value!r}, not a number"
    x = float(value)
    low, high = measure_range(column)
    if not math.isfinite(x):
        return f"{column} is {x}, not a finite number"
    if not low - _SLACK <= x <= high + _SLACK:
        return f"{column} is {x:g}, outside its range [{low:g}, {high:g}]"
    return None


def values_problem(values: Any) -> str | None:
    """Why a ``{measure: value}`` mapping is not a set of measure values, or ``None``."""
    if not isinstance(values, Mapping):
        return f"expected an object of measure values, got {type(values).__name__}"
    for column, value in values.items():
        problem = value_problem(str(column), value)
        if problem:
            return problem
    return None


def array_digest(array: np.ndarray) -> str:
    """SHA-256 (hex) of an array's dtype, shape and C-order bytes."""
    a = np.ascontiguousarray(array)
    h = hashlib.sha256(f"{a.dtype.str}{a.shape}".encode())
    h.update(a.tobytes())
    return h.hexdigest()


def array_facts(array: np.ndarray) -> dict[str, Any]:
    """What a sealed document records about an array it names: digest, shape, dtype."""
    a = np.asarray(array)
    return {"sha256": array_digest(a), "shape": list(a.shape), "dtype": a.dtype.str}


def array_problem(array: Any, facts: Any, rows: int | None = None, columns: int | None = None) -> str | None:
    """Why ``array`` is not the array ``facts`` (from :func:`array_facts`) describe, or ``None``.

    Also refuses non-finite entries, and a shape other than ``(rows, columns)``
    where those are given.
    """
    if not isinstance(facts, Mapping):
        return "no digest recorded for the array"
    if not isinstance(array, np.ndarray) or array.ndim != 2 or array.dtype.kind != "f":
        return "not a two-dimensional float array"
    if list(array.shape) != facts.get("shape"):
        return f"shape {array.shape} differs from the recorded {facts.get('shape')}"
    if (rows is not None and array.shape[0] != rows) or (columns is not None and array.shape[1] != columns):
        return f"shape {array.shape} differs from the expected ({rows}, {columns})"
    if array_digest(array) != facts.get("sha256"):
        return "its SHA-256 differs from the recorded one"
    if not np.isfinite(array).all():
        return "it holds non-finite values"
    return None


def doc_digest(doc: Mapping[str, Any]) -> str:
    """SHA-256 (hex) of a JSON document's canonical text, without its own ``sha256`` field."""
    body = {k: v for k, v in doc.items() if k != "sha256"}
    text = json.dumps(jsonable(body), sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def seal(doc: Mapping[str, Any]) -> dict[str, Any]:
    """The document in its stored form (NaN as ``null``) with the digest of its content added."""
    body = jsonable({k: v for k, v in doc.items() if k != "sha256"})
    return {**body, "sha256": doc_digest(body)}


def seal_problem(doc: Any) -> str | None:
    """Why ``doc`` is not an intact sealed document of the current format, or ``None``."""
    if not isinstance(doc, dict):
        return f"expected a JSON object, got {type(doc).__name__}"
    if doc.get("format") != FORMAT:
        return f"format {doc.get('format')!r}, expected {FORMAT} (written by another foldbench version)"
    digest = doc.get("sha256")
    try:
        intact = isinstance(digest, str) and doc_digest(doc) == digest
    except (TypeError, ValueError):
        intact = False
    return None if intact else "its SHA-256 does not match its content"
