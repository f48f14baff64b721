"""Loading modules only when they are needed: names of a package loaded on first use (PEP 562
module ``__getattr__``), so that importing the package does not import what its names need
until one is asked for; and a command's libraries imported at once with the cyclic garbage
collector paused (:func:`import_frozen`)."""

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


def import_frozen(*modules: str) -> None:
    """Import ``modules`` with the cyclic garbage collector paused, then move everything made so
    far out of its sight (``gc.freeze``), and leave the collector as found.

    An import makes many objects (models, their schemas, dataclasses, functions) and none of
    them is garbage: collections during it only rescan them, and so would every full
    collection after it for as long as the process lives. A command imports its libraries
    this way before it works (the command line itself, ``sweeprig check``'s formats and
    planner: about 5 % of its start-up); the collector then runs as usual on the work."""
    import gc

    was_enabled = gc.isenabled()
    gc.disable()
    try:
        for module in modules:
            importlib.import_module(module)
    finally:
        gc.freeze()
        if was_enabled:
            gc.enable()
