"""A package's public names loaded from their sub-modules on first use (PEP 562) (layer 0).

Used by the package ``__init__`` files whose sub-modules are heavy (the fits and scipy.stats,
the materials' optics): importing one light sub-module, or building the command line's
parser, then does not load them all.
"""

from __future__ import annotations

import importlib

__all__ = ["lazy_names"]


def lazy_names(package: str, sources: dict[str, str], namespace: dict):
    """The module ``__getattr__`` and ``__dir__`` of ``package`` for the names in ``sources``.

    ``sources`` maps each public name to the sub-module (relative to ``package``) that
    defines it; ``namespace`` is the package's ``globals()``, where a loaded name is kept so
    that later uses are plain attribute reads.  Any other name raises AttributeError, so that
    ``from package import some_module`` goes on to import the sub-module.
    """

    def __getattr__(name: str):
        source = sources.get(name)
        if source is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(f"{package}.{source}"), name)
        namespace[name] = value
        return value

    def __dir__() -> list[str]:
        return sorted(set(namespace) | set(namespace.get("__all__", ())))

    return __getattr__, __dir__
