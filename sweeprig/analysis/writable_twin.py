"""A writable twin of a frozen slots class, for building many of its objects fast.

A frozen dataclass sets each field through ``object.__setattr__`` in its ``__init__``; a large
run makes hundreds of thousands of figures, budget lines and budgets. The twin has the same
slots and no frozen ``__setattr__``: a builder fills one with plain attribute stores, then
makes it the frozen class by ``__class__`` assignment, which Python allows between two
classes of the same slot layout (the language reference, "__class__" assignment). Nothing
else ever sees a twin.
"""

from __future__ import annotations


def writable_twin(cls: type) -> type | None:
    """A class with the slots of ``cls`` (a frozen dataclass with ``slots=True``) and no
    frozen ``__setattr__``; None when this interpreter refuses the ``__class__`` switch
    (the builders then use the class's own constructor)."""
    twin = type(f"_Writable{cls.__name__}", (), {
        "__slots__": cls.__slots__,
        "__doc__": f"The slots of {cls.__name__}, writable (see {__name__}).",
        "__module__": cls.__module__,
    })
    try:
        twin().__class__ = cls
    except TypeError:
        return None
    return twin
