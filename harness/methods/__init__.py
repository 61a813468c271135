"""Embedding methods: a registry of estimator builders and the one call that fits them.

Importing this package registers the built-in methods.
"""

from . import builtin  # registers the built-in methods
from ._fit import DegenerateEmbedding, fit_embedding
from ._registry import METHODS, MethodSpec, register_method
from .lookup import get_method_spec
from .plugins import check_method

__all__ = [
    "METHODS",
    "DegenerateEmbedding",
    "MethodSpec",
    "builtin",
    "check_method",
    "fit_embedding",
    "get_method_spec",
    "register_method",
]
