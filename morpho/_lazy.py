"""PEP 562 lazy attributes for packages whose members pull in heavy libraries."""

from __future__ import annotations

import importlib
from collections.abc import Callable, Mapping, Sequence

__all__ = ["lazy_attributes"]


def lazy_attributes(package: str, where: Mapping[str, str], namespace: dict,
                    public: Sequence[str]) -> tuple[Callable, Callable]:
    """Module ``__getattr__`` and ``__dir__`` that import ``where[name]`` (relative to ``package``) on first use.

    The value is cached in ``namespace`` (the package's globals), so each submodule loads once.
    """

    def __getattr__(name):
        if name in where:
            value = getattr(importlib.import_module(where[name], package), name)
            namespace[name] = value
            return value
        raise AttributeError(f"module {package!r} has no attribute {name!r}")

    def __dir__():
        return sorted(set(namespace) | set(public))

    return __getattr__, __dir__
