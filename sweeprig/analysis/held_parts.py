"""A sequence held as parts: column blocks that make their items when read, and tuples of
items: :class:`HeldParts`, the common ground of a run's figures
(:class:`~sweeprig.analysis.figure_block.Figures`) and its judgements
(:class:`~sweeprig.analysis.judged_blocks.Judgements`).

A large run's items are mostly many of one kind, held as a block of columns; the few others
are kept as they are. Read as a ``Sequence``, a block's items are made when they are read
(a slice of a block at a time when iterated), so nothing holds them all.
"""

from __future__ import annotations

import bisect
from collections.abc import Iterable, Iterator, Sequence
from typing import Any, ClassVar, Generic, TypeVar, overload

T = TypeVar("T")


class HeldParts(Sequence[T], Generic[T]):
    """Items in order, held as parts: blocks (of :attr:`block_type`, whose items
    :meth:`_made` makes) and tuples of items; consecutive tuples are joined, empty parts
    left out. Compares equal to any sequence of equal items."""

    __slots__ = ("_parts", "_starts")
    #: The type of a block of columns.
    block_type: ClassVar[type]
    #: What the items are called (in messages).
    noun: ClassVar[str] = "item"

    def __init__(self, parts: Iterable[Any] = ()) -> None:
        kept: list[Any] = []
        for part in parts:
            if isinstance(part, self.block_type):
                if len(part):
                    kept.append(part)
            elif part:
                if kept and not isinstance(kept[-1], self.block_type):
                    kept[-1] = (*kept[-1], *part)
                else:
                    kept.append(tuple(part))
        self._parts: tuple[Any, ...] = tuple(kept)
        starts = [0]
        for part in self._parts:
            starts.append(starts[-1] + len(part))
        self._starts = starts

    @property
    def parts(self) -> tuple[Any, ...]:
        """The blocks and tuples of items, in order."""
        return self._parts

    @staticmethod
    def _made(block: Any, lo: int, hi: int) -> list[T]:
        """The items ``lo`` to ``hi`` of ``block``, made."""
        raise NotImplementedError

    def __len__(self) -> int:
        return self._starts[-1]

    @overload
    def __getitem__(self, index: int) -> T: ...

    @overload
    def __getitem__(self, index: slice) -> list[T]: ...

    def __getitem__(self, index: int | slice) -> T | list[T]:
        if isinstance(index, slice):
            start, stop, step = index.indices(len(self))
            if step != 1:
                return [self[i] for i in range(start, stop, step)]
            return self.between(start, stop)
        count = len(self)
        if index < 0:
            index += count
        if not 0 <= index < count:
            raise IndexError(f"{self.noun} index out of range")
        k = bisect.bisect_right(self._starts, index) - 1
        part, row = self._parts[k], index - self._starts[k]
        if isinstance(part, self.block_type):
            return self._made(part, row, row + 1)[0]
        return part[row]

    def spans(self, start: int, stop: int) -> Iterator[tuple[Any, int, int, int]]:
        """The parts holding the items at positions ``start`` to ``stop``: (part, the
        position of its first item, its rows lo to hi among them) each, in order."""
        starts = self._starts
        for k, part in enumerate(self._parts):
            first, end = starts[k], starts[k + 1]
            if end > start and first < stop:
                yield part, first, max(start, first) - first, min(stop, end) - first

    def between(self, start: int, stop: int) -> list[T]:
        """The items at positions ``start`` to ``stop``."""
        out: list[T] = []
        for part, _first, lo, hi in self.spans(start, stop):
            out += self._made(part, lo, hi) if isinstance(part, self.block_type) else part[lo:hi]
        return out

    def __iter__(self) -> Iterator[T]:
        step = 20_000  # (a block made a slice at a time: never all of it at once)
        for part in self._parts:
            if isinstance(part, self.block_type):
                for lo in range(0, len(part), step):
                    yield from self._made(part, lo, min(lo + step, len(part)))
            else:
                yield from part

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Sequence) or isinstance(other, str):
            return NotImplemented
        return len(self) == len(other) and all(a == b for a, b in zip(self, other,
                                                                       strict=True))

    __hash__ = None  # type: ignore[assignment]

    def __repr__(self) -> str:
        blocks = sum(isinstance(p, self.block_type) for p in self._parts)
        return f"{type(self).__name__}({len(self)} {self.noun}s, {blocks} blocks)"

