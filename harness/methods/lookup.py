"""Finding a method by what a suite calls it: a registry name, a plug-in path or an entry-point name."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace

from ..errors import InputError, suggest
from ._registry import METHODS, MethodSpec
from .plugins import entry_point_target, plugin_spec


def get_method_spec(name: str, where: str = "", roots: Sequence[str] = ()) -> MethodSpec:
    """Look up a method: registry name, ``package.module:Name``, or an entry-point name.

    Parameters
    ----------
    name : str
        As written in a suite's ``use``.
    where : str
        Location for the error message.
    roots : sequence of str
        Extra folders a plug-in module may be imported from (see
        :mod:`harness.methods.plugins`).
    """
    if ":" in name:
        return plugin_spec(name, where, roots)
    if name in METHODS:
        spec = METHODS[name]
        missing = spec.missing_package()
        if missing is not None:
            raise InputError(
                where,
                f"method '{name}' needs the package '{missing}', which is not installed: "
                f"pip install 'foldbench[methods]'",
            )
        return spec
    target = entry_point_target(name)
    if target is not None:
        return replace(plugin_spec(target, where, roots), name=name)
    raise InputError(
        where,
        f"unknown method '{name}'{suggest(name, METHODS)}; "
        f"see 'foldbench list methods', or name a plug-in as "
        f"'package.module:Name'",
    ) from None
