"""Names of a package loaded on first use (PEP 562 module ``__getattr__``), so that importing
the package does not import what its names need until one is asked for."""

from __future__ import annotations

import importlib
from collections.abc import Callable, Mapping
from typing import Any


def lazy_names(package: str, where: Mapping[str, str], namespace: dict[str, Any]
               ) -> Callable[[str], Any]:
    """A module ``__getattr__`` for ``package``: ``where`` maps each name to the module that
    defines it; a name once loaded is kept in the package's ``namespace`` (its globals)."""

    def getattr_(name: str) -> Any:
        module = where.get(name)
        if module is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(module), name)
        namespace[name] = value
        return value

    return getattr_
