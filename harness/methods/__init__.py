"""Embedding methods: a registry of estimator builders and the one call that fits them.

Importing this package registers the built-in methods.
"""
from ._registry import METHODS, MethodSpec, get_method_spec, register_method
from ._fit import DegenerateEmbedding, fit_embedding
from . import builtin  # noqa: F401  (registration)

__all__ = ["METHODS", "DegenerateEmbedding", "MethodSpec", "fit_embedding", "get_method_spec", "register_method"]
