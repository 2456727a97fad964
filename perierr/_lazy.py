"""Names a package loads on first use (PEP 562), so that a command imports only what it needs."""

from __future__ import annotations

import importlib

__all__ = ["lazy_names"]


def lazy_names(package: str, namespace: dict, names: dict, submodules=()) -> tuple:
    """Module ``__getattr__`` and ``__dir__`` for a package whose heavier names load when first asked for.

    Parameters
    ----------
    package : str
        The package's ``__name__``.
    namespace : dict
        The package's ``globals()``: a name found once is stored there and is an ordinary attribute after.
    names : dict
        Public name -> the module that defines it (absolute, or relative to ``package`` with a leading dot).
    submodules : sequence of str
        Submodules reachable as attributes, imported when first asked for.
    """

    def __getattr__(name):
        if name in names:
            value = getattr(importlib.import_module(names[name], package), name)
            namespace[name] = value
            return value
        if name in submodules:
            return importlib.import_module(f"{package}.{name}")
        raise AttributeError(f"module {package!r} has no attribute {name!r}")

    def __dir__():
        return sorted(set(namespace) | set(names) | set(submodules))

    return __getattr__, __dir__
