"""Conditions read from columns: a read-only mapping per row that holds no values of its own.

A large run's reduction makes a conditions mapping for the points of every figure family
(about 170,000 at 100k points, a million and more at 1M). A dict behind a mapping proxy
cost 340 bytes with 8 keys and 540 with 12; a :class:`ConditionRow` is 48 bytes: its row
number and the :class:`ConditionColumns` it shares with every other row of the call that
made it, whose columns hold each value once a row (8 bytes), or a code into a few distinct
values where they repeat (1 or 2 bytes).

A row reads like the mapping it replaces: the same keys in the same order, each value the
Python object ``tolist`` would give (a float the same bit for bit, -0.0 stays -0.0), equal
to any mapping of equal items, unhashable, read-only. A value is made at each reading (two
readings are equal, not the same object).
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence
from typing import Any

import numpy as np

#: A column: every row's value, or (the distinct values, each row's code among them).
Column = tuple[np.ndarray, np.ndarray | None]


class ConditionColumns:
    """Named columns of equal length (:data:`Column` each): the values that
    :class:`ConditionRow` objects read. ``names`` in their order (a row's keys)."""

    __slots__ = ("_at", "names")

    def __init__(self, names: Sequence[str], columns: Sequence[Column]) -> None:
        if len(names) != len(columns):
            raise ValueError("one column a name")
        self.names = tuple(names)
        self._at: dict[str, Column] = dict(zip(self.names, columns, strict=True))

    def rows(self, rows: Sequence[int] | range) -> list[ConditionRow]:
        """A :class:`ConditionRow` for each of ``rows`` (positions in the columns)."""
        return [ConditionRow(self, row) for row in rows]

    def value(self, name: str, row: int) -> Any:
        """The value of ``name`` at ``row`` (KeyError: no such name)."""
        values, codes = self._at[name]
        return values.item(row if codes is None else codes.item(row))

    def __contains__(self, name: object) -> bool:
        return name in self._at


class ConditionRow(Mapping[str, Any]):
    """One row of a :class:`ConditionColumns` as a read-only mapping (module docstring)."""

    __slots__ = ("_columns", "_row")

    def __init__(self, columns: ConditionColumns, row: int) -> None:
        self._columns = columns
        self._row = row

    def __getitem__(self, key: str) -> Any:
        return self._columns.value(key, self._row)

    def get(self, key: str, default: Any = None) -> Any:
        if key in self._columns:
            return self._columns.value(key, self._row)
        return default

    def __contains__(self, key: object) -> bool:
        return key in self._columns

    def __iter__(self) -> Iterator[str]:
        return iter(self._columns.names)

    def __len__(self) -> int:
        return len(self._columns.names)

    def __eq__(self, other: object) -> bool:
        if isinstance(other, ConditionRow) and other._columns is self._columns \
                and other._row == self._row:
            return True
        if not isinstance(other, Mapping):
            return NotImplemented
        return dict(self.items()) == dict(other.items())

    __hash__ = None  # type: ignore[assignment]  # as a dict's or a mapping proxy's

    def __repr__(self) -> str:
        return f"{type(self).__name__}({dict(self.items())!r})"

    def __reduce__(self) -> tuple[Any, tuple[Any, ...]]:
        # a copy (or a pickle) holds its own values, not the columns of every other row
        return one_row, (tuple(self), tuple(self.values()))


def one_row(names: Sequence[str], values: Sequence[Any]) -> ConditionRow:
    """A :class:`ConditionRow` of columns of its own holding ``values`` under ``names``."""
    columns: list[Column] = []
    for value in values:
        held = np.empty(1, dtype=object)
        held[0] = value
        columns.append((held, None))
    return ConditionColumns(names, columns).rows(range(1))[0]


__all__ = ["Column", "ConditionColumns", "ConditionRow", "one_row"]
