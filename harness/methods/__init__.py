"""Embedding methods: a registry of estimator builders and the one call that fits them.

Importing this package registers the built-in methods.
"""

from . import builtin, files, modern  # register the built-in methods, file embeddings and adapters
from ._fit import DegenerateEmbedding, fit_embedding, fit_model
from ._place import NO_MAP, OUT_OF_SAMPLE_MAPS, knn_interpolation, place_points
from ._registry import METHODS, MethodSpec, register_method
from ._threads import cell_threads, thread_budget
from .lookup import get_method_spec
from .plugins import check_method

__all__ = [
    "METHODS",
    "NO_MAP",
    "OUT_OF_SAMPLE_MAPS",
    "DegenerateEmbedding",
    "MethodSpec",
    "builtin",
    "cell_threads",
    "check_method",
    "files",
    "fit_embedding",
    "fit_model",
    "get_method_spec",
    "knn_interpolation",
    "modern",
    "place_points",
    "register_method",
    "thread_budget",
]
