"""Figures as columns: :func:`figure_table`, one row per figure of the names asked for.

What a plot or a table needs from many figures at once (a large run holds hundreds of
thousands), read in one pass over the figures of those names only, without a dict per
figure. Columns, in this order:

``name`` (str), ``value`` (float, in ``unit``), ``unit`` (str), ``bound`` ("<", ">" or ""),
``uncertainty_db`` (expanded, k = 2, in ``unit``; NaN without a budget), ``flags`` (int64
flag mask: bit i is ``FLAGS[i]``, see :func:`sweeprig.analysis.figures.flag_bit`;
:func:`sweeprig.analysis.captures.has_bit` tests one), ``points`` (tuple of run-store point
indices), then one column per condition key met among those figures, in order of first
appearance: floats (NaN where a figure lacks it), except ``study`` and any key with text
values, which are str ("" where missing). The index is the figure's position in the sequence
given (for a run, ``run.figures``), so a row leads back to its Figure.
"""

from __future__ import annotations

import ctypes
import math
import sys
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from itertools import repeat
from operator import is_, itemgetter, methodcaller
from typing import TYPE_CHECKING

import numpy as np

from sweeprig.analysis.figures import Figure, flag_bit

if TYPE_CHECKING:
    import pandas as pd

    from sweeprig.analysis.captures import MadeConditions

#: The columns every figure table has, before its condition columns.
BASE_COLUMNS: tuple[str, ...] = ("name", "value", "unit", "bound", "uncertainty_db", "flags",
                                 "points")


def figure_table(figures: Sequence[Figure], names: Iterable[str] | None = None
                 ) -> pd.DataFrame:
    """The figures called any of ``names`` (None: all) as a table (see the module
    docstring)."""
    import pandas as pd

    rows, columns = figure_columns(figures, names)
    return pd.DataFrame({k: v.tolist() if v.dtype == object else v
                         for k, v in columns.items()},
                        index=pd.Index(rows, dtype=np.int64, name="figure"))


def figure_columns(figures: Sequence[Figure], names: Iterable[str] | None = None, *,
                   conditions: RunConditions | None = None
                   ) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """:func:`figure_table`'s rows (positions in ``figures``) and columns as numpy arrays
    (text and ``points`` as object arrays), without building the DataFrame: for a caller
    that formats them at once (the report's figure table). ``conditions``: the figures' own
    :class:`RunConditions` (a run's ``figure_conditions``), whose columns then give the
    condition columns (:func:`_conditions_from_run`)."""
    from sweeprig.analysis.figure_block import Figures, named_columns

    wanted = None if names is None else frozenset(names)
    if isinstance(figures, Figures) and wanted is not None:
        # a block's columns read as they are: none of its figures made
        positions, columns, mappings = named_columns(figures, wanted)
    else:
        rows: list[int] = []
        picked: list[Figure] = []
        for i, f in enumerate(figures):
            if wanted is None or f.name in wanted:
                rows.append(i)
                picked.append(f)
        positions, columns = np.array(rows, dtype=np.int64), base_columns(picked)
        mappings = [f.conditions for f in picked]
    if conditions is not None:
        taken = _conditions_from_run(conditions, *conditions.distinct_at(figures, positions))
        if taken is not None:
            columns.update(taken)
            return positions, columns
    # figures of one point or group share their conditions mapping: read each distinct
    # mapping once (in order of first appearance) and spread its values by index
    distinct, which = distinct_mappings(mappings)
    for key, values in condition_arrays(distinct).items():
        columns[key] = values[which]
    return positions, columns


def _conditions_from_run(conditions: RunConditions, distinct: np.ndarray, which: np.ndarray
                         ) -> dict[str, np.ndarray] | None:
    """The condition columns :func:`figure_columns` reads from the mappings of some figures
    (``distinct``, ``which``: :meth:`RunConditions.distinct_at` of them), taken from the
    run's columns: the keys those mappings hold, in their order of first appearance there,
    each as the run's column (the same values: float, or text); None when a key is text in
    the run but not among these figures (their column would be numbers: read from the
    mappings)."""
    found: list[tuple[int, int, str]] = []
    for key, values in conditions.arrays.items():
        column = conditions.column(key)
        held = column.present[distinct]
        if not held.any():
            continue
        if values.dtype == object and key != "study" and not column.text[distinct].any():
            return None
        at = int(np.argmax(held))
        found.append((at, list(conditions.mappings[int(distinct[at])]).index(key), key))
    return {key: conditions.arrays[key][distinct][which] for _at, _in, key in sorted(found)}


def base_columns(figures: Sequence[Figure]) -> dict[str, np.ndarray]:
    """The :data:`BASE_COLUMNS` of ``figures``, one pass over them (text and ``points`` as
    object arrays)."""
    points = np.empty(len(figures), dtype=object)
    points[:] = [tuple(f.points) for f in figures]
    return {
        "name": np.array([f.name for f in figures], dtype=object),
        "value": np.array([f.value for f in figures], dtype=float),
        "unit": np.array([f.unit for f in figures], dtype=object),
        "bound": np.array([f.bound or "" for f in figures], dtype=object),
        "uncertainty_db": np.array([f.uncertainty_db for f in figures], dtype=float),
        "flags": flag_masks(figures),
        "points": points,
    }


def flag_masks(figures: Sequence[Figure]) -> np.ndarray:
    """Each figure's flags as a flag mask (int64; the mask of a flags tuple worked out once:
    most figures share one)."""
    masks: dict[tuple[str, ...], int] = {}
    out = []
    for f in figures:
        mask = masks.get(f.flags)
        if mask is None:
            mask = masks[f.flags] = sum(flag_bit(flag) for flag in f.flags)
        out.append(mask)
    return np.array(out, dtype=np.int64)


#: Mappings read at a time by :func:`condition_arrays` (its passing lists stay this small).
CONDITION_CHUNK = 16_384


def condition_arrays(mappings: Sequence[Mapping[str, object]]) -> dict[str, np.ndarray]:
    """One array per condition key of ``mappings`` (in order of first appearance), one
    element per mapping: ``study`` and any key with a text value as str ("" where missing),
    the others as float (NaN where missing).

    The mappings are read :data:`CONDITION_CHUNK` at a time, per distinct key order (the
    figures of one kind share theirs): each group's values taken a key at a time (one
    ``itemgetter`` pass over its mappings), a float column's values converted by NumPy at
    once (``float(v)`` of each, None → NaN) into its array, so only one chunk's values are
    ever held as lists;
    the study's values are taken with their groups too, and any other key found to hold
    text is read again at the end, key by key. The same as
    :func:`condition_arrays_by_key` (the tests compare the two)."""
    return _read_conditions(mappings)[0]


def _read_conditions(mappings: Sequence[Mapping[str, object]]
                     ) -> tuple[dict[str, np.ndarray], dict[str, ConditionColumn]]:
    """:func:`condition_arrays` of ``mappings`` and, in the same reading, every key's
    :class:`ConditionColumn` (which mappings hold it, and a number)."""
    count = len(mappings)
    numbers: dict[str, np.ndarray] = {}  # every key, in order of first appearance
    present: dict[str, np.ndarray] = {}
    number: dict[str, np.ndarray] = {}
    text: set[str] = {"study"}
    # the values of a key known to be text from the start, taken with their groups
    # (objects, None where missing); a key found to be text later is read again at the end
    texts_read: dict[str, np.ndarray] = {key: np.full(count, None, dtype=object)
                                          for key in text}
    for start in range(0, count, CONDITION_CHUNK):
        chunk = list(mappings[start:start + CONDITION_CHUNK])
        for order, members in _key_order_groups(chunk):
            if not order:
                continue
            picked = chunk if members is None else list(map(chunk.__getitem__,
                                                             members.tolist()))
            rows = (np.arange(start, start + len(chunk), dtype=np.intp) if members is None
                    else start + members)
            for key in order:
                # a key at a time (one C-level pass each): three times as fast as taking
                # every key of a mapping at once and turning the rows into columns
                values = list(map(itemgetter(key), picked))
                column = numbers.get(key)
                if column is None:
                    column = numbers[key] = np.full(count, np.nan)
                    present[key] = np.zeros(count, dtype=bool)
                    number[key] = np.zeros(count, dtype=bool)
                present[key][rows] = True
                if key in text:
                    held = texts_read.get(key)
                    if held is not None:
                        held[rows] = np.fromiter(values, dtype=object, count=len(values))
                    continue
                kinds = set(map(type, values))
                if any(issubclass(kind, str) for kind in kinds):
                    text.add(key)
                    continue
                column[rows] = np.array(values, dtype=float)
                if all(issubclass(kind, int | float) for kind in kinds):
                    number[key][rows] = True
                else:  # (None, or a number type of another kind: not a number here)
                    number[key][rows] = [isinstance(v, int | float) for v in values]
    return _finished_columns(mappings, numbers, present, number, text, texts_read)


def _read_made_conditions(mappings: Sequence[Mapping[str, object]],
                          made: Sequence[MadeConditions]
                          ) -> tuple[dict[str, np.ndarray], dict[str, ConditionColumn]]:
    """:func:`_read_conditions` of ``mappings``: those :func:`conditions_records` made (a
    :class:`~sweeprig.analysis.captures.MadeConditions` of ``made`` holds each, so an
    identity found there is that mapping's) read from the columns they were made of, a
    column at a time; the others from themselves. The same arrays and columns (the tests
    compare the two readings)."""
    count = len(mappings)
    sources = [m for m in made if m.mappings and len(m.names) < 63
               and all(kind in "fiubO" for kind in m.kinds())]
    if not count or not sources:
        return _read_conditions(mappings)
    ids = object_ids(mappings)
    made_ids = np.concatenate([object_ids(m.mappings) for m in sources])
    made_source = np.concatenate([np.full(len(m.mappings), k, dtype=np.int64)
                                  for k, m in enumerate(sources)])
    made_row = np.concatenate([np.arange(len(m.mappings), dtype=np.int64) for m in sources])
    order = np.argsort(made_ids, kind="stable")
    made_ids, made_source, made_row = made_ids[order], made_source[order], made_row[order]
    at = np.minimum(np.searchsorted(made_ids, ids), made_ids.size - 1)
    found = made_ids[at] == ids
    source = np.where(found, made_source[at], -1)
    row = np.where(found, made_row[at], 0)
    members = [np.flatnonzero(source == k) for k in range(len(sources))]
    others = np.flatnonzero(~found)
    other = [mappings[i] for i in others.tolist()]

    # the order of the keys: each kind of mapping (a source and the keys its row lacks, or
    # another mapping's own keys) in the order of its first mapping, its keys in order
    pattern = np.zeros(count, dtype=np.int64)
    kinds: list[tuple[str, ...]] = []
    for k, m in enumerate(sources):
        lacks = np.zeros(len(m.mappings), dtype=np.int64)
        for bit, lacking in enumerate(m.lacking):
            if lacking is not None:
                lacks |= lacking.astype(np.int64) << bit
        codes, inverse = np.unique(lacks[row[members[k]]], return_inverse=True)
        pattern[members[k]] = len(kinds) + inverse.ravel()
        kinds += [tuple(n for j, n in enumerate(m.names) if not code >> j & 1)
                  for code in codes.tolist()]
    other_kinds: dict[tuple[str, ...], int] = {}
    pattern[others] = [other_kinds.setdefault(tuple(c), len(kinds) + len(other_kinds))
                       for c in other]
    kinds += list(other_kinds)
    first, _ = first_appearances(pattern)
    keys = list(dict.fromkeys(key for p in pattern[first].tolist() for key in kinds[p]))

    other_out, other_read = _read_conditions(other)
    text = {"study"} | {key for key, c in other_read.items() if c.text.any()}
    where: list[tuple[np.ndarray, np.ndarray]] = []  # per source: its members and rows
    for k, m in enumerate(sources):
        rows = row[members[k]]
        where.append((members[k], rows))
        for j, (name, kind) in enumerate(zip(m.names, m.kinds(), strict=True)):
            if kind == "O" and name not in text:
                held = set(map(type, m.values(j, rows[~m.absent(j, rows)]).tolist()))
                if any(issubclass(held_kind, str) for held_kind in held):
                    text.add(name)
    numbers: dict[str, np.ndarray] = {}
    present: dict[str, np.ndarray] = {}
    number: dict[str, np.ndarray] = {}
    texts_read: dict[str, np.ndarray] = {}
    for key in keys:
        held_at = np.zeros(count, dtype=bool)
        column = np.full(count, np.nan)
        is_number = np.zeros(count, dtype=bool)
        texts = np.full(count, None, dtype=object) if key in text else None
        for m, (at_k, rows) in zip(sources, where, strict=True):
            if key not in m.names:
                continue
            j = m.names.index(key)
            here = ~m.absent(j, rows)
            to, rows = at_k[here], rows[here]
            held_at[to] = True
            values = m.values(j, rows)
            if texts is not None:
                texts[to] = values.astype(object)  # (the objects the mappings hold)
            elif values.dtype != object:
                column[to] = values.astype(float)
                is_number[to] = True
            else:
                listed = values.tolist()
                column[to] = np.array(listed, dtype=float)
                if all(issubclass(kind, int | float) for kind in set(map(type, listed))):
                    is_number[to] = True
                else:  # (a number type of another kind: not a number here)
                    is_number[to] = [isinstance(v, int | float) for v in listed]
        read = other_read.get(key)
        if read is not None:
            held_at[others] = read.present
            if texts is not None:
                texts[others] = (read.texts if read.texts is not None else np.fromiter(
                    map(methodcaller("get", key), other), dtype=object, count=len(other)))
            else:
                column[others] = other_out[key]
                is_number[others] = read.number
        numbers[key], present[key], number[key] = column, held_at, is_number
        if texts is not None:
            texts_read[key] = texts
    return _finished_columns(mappings, numbers, present, number, text, texts_read)


def _finished_columns(mappings: Sequence[Mapping[str, object]],
                      numbers: dict[str, np.ndarray], present: dict[str, np.ndarray],
                      number: dict[str, np.ndarray], text: set[str],
                      texts_read: dict[str, np.ndarray]
                      ) -> tuple[dict[str, np.ndarray], dict[str, ConditionColumn]]:
    """The end of a reading of ``mappings`` (:func:`_read_conditions`): per key, in the
    order of ``numbers``, its array and its :class:`ConditionColumn`, from its ``numbers``
    (float, NaN where missing), ``present`` and ``number`` masks, and for a key in
    ``text`` its values (``texts_read``; read from the mappings where not given)."""
    count = len(mappings)
    out: dict[str, np.ndarray] = {}
    read: dict[str, ConditionColumn] = {}
    never = np.zeros(count, dtype=bool)  # (the text mask of every key never text)
    for key, column in numbers.items():
        if key in text:
            texts = texts_read.get(key)
            if texts is None:  # (objects: no value taken apart)
                texts = np.fromiter(map(methodcaller("get", key), mappings), dtype=object,
                                    count=count)
            missing = np.fromiter(map(is_, texts, repeat(None)), dtype=bool, count=count)
            # as text: itself, "" for None, str() of anything else
            out[key] = shown = texts.copy()
            shown[missing] = ""
            if set(map(type, texts)) <= {str, type(None)}:  # (texts: each element's kind)
                is_text, is_number = ~missing, np.zeros(count, dtype=bool)
            else:
                is_text = np.fromiter(map(isinstance, texts, repeat(str)), dtype=bool,
                                      count=count)
                is_number = np.fromiter(map(isinstance, texts, repeat(int | float)),
                                        dtype=bool, count=count)
                for i in np.flatnonzero(~is_text & (shown != "")).tolist():
                    shown[i] = str(texts[i])
            value = np.full(count, math.nan)
            if is_number.any():
                value[is_number] = np.array(texts[is_number].tolist(), dtype=float)
            read[key] = ConditionColumn(present[key], is_number, value, is_text, texts)
        else:
            out[key] = column
            value = column  # (shared: NaN already wherever there is no number, but for
            if not np.isnan(column[present[key] & ~number[key]]).all():  # another number type)
                value = column.copy()
                value[~number[key]] = math.nan
            read[key] = ConditionColumn(present[key], number[key], value, never, None)
    return out, read


def _key_order_groups(chunk: list[Mapping[str, object]]
                      ) -> list[tuple[tuple[str, ...], np.ndarray | None]]:
    """The mappings of ``chunk`` grouped by their keys in order: each distinct order, in
    order of first appearance, with its members' positions in ``chunk`` (ascending, intp;
    None: all of them)."""
    orders = list(map(tuple, chunk))
    code_of = dict.fromkeys(orders)
    if len(code_of) == 1:
        return [(orders[0], None)]
    for code, order in enumerate(code_of):
        code_of[order] = code
    codes = np.fromiter(map(code_of.__getitem__, orders), dtype=np.intp, count=len(orders))
    members = np.argsort(codes, kind="stable")
    sizes = np.bincount(codes, minlength=len(code_of))
    return [(order, members[end - size:end])
            for order, end, size in zip(code_of, np.cumsum(sizes).tolist(), sizes.tolist(),
                                        strict=True)]


def condition_arrays_by_key(mappings: Sequence[Mapping[str, object]]
                            ) -> dict[str, np.ndarray]:
    """:func:`condition_arrays`, read key by key from every mapping: the reference its
    faster reading is compared with."""
    keys: dict[str, None] = {}
    for conditions in mappings:
        for key in conditions:
            if key not in keys:
                keys[key] = None
    out: dict[str, np.ndarray] = {}
    for key in keys:
        values = [c.get(key) for c in mappings]
        if key == "study" or any(isinstance(v, str) for v in values):
            out[key] = np.array(["" if v is None else str(v) for v in values], dtype=object)
        else:
            out[key] = np.array([np.nan if v is None else float(v) for v in values],
                                dtype=float)
    return out


@dataclass(frozen=True)
class ConditionColumn:
    """One condition key read from every one of some conditions mappings, as arrays with an
    element per mapping: ``present`` (it holds the key), ``number`` (its value is an int or
    a float, bool included: what :func:`condition_numbers` counts), ``value`` (that number
    as a float; NaN elsewhere), ``text`` (its value is a str) and ``texts`` (the values,
    objects, None where missing; None for a key whose values are never text)."""

    present: np.ndarray
    number: np.ndarray
    value: np.ndarray
    text: np.ndarray
    texts: np.ndarray | None

    @classmethod
    def of(cls, mappings: Sequence[Mapping[str, object]], key: str) -> ConditionColumn:
        """``key`` of every one of ``mappings`` (all their keys are read: for a caller
        holding no :class:`RunConditions`)."""
        read = _read_conditions(mappings)[1].get(key)
        return read if read is not None else cls.absent(len(mappings))

    @classmethod
    def absent(cls, count: int) -> ConditionColumn:
        """A key none of ``count`` mappings holds."""
        nothing = np.zeros(count, dtype=bool)
        return cls(nothing, nothing, np.full(count, math.nan), nothing, None)

    def values_at(self, rows: np.ndarray) -> np.ndarray:
        """The values at ``rows``, objects (None where missing)."""
        if self.texts is None:
            out = np.full(rows.size, None, dtype=object)
            held = self.present[rows]
            out[held] = self.value[rows[held]]  # (numbers: never asked for as values)
            return out
        return self.texts[rows]

    def numbers(self, rows: np.ndarray, *, finite: bool = True) -> list[float] | None:
        """:func:`condition_numbers` of the mappings at ``rows`` (int64 indices), from the
        arrays; None where their numbers hold a NaN or zeros of both signs (which the set
        of the values themselves keeps apart or merges by identity and order of meeting:
        the caller reads those mappings as :func:`condition_numbers` does)."""
        values = self.value[rows[self.number[rows]]]
        if np.isnan(values).any():
            return None
        zeros = np.signbit(values[values == 0])
        if zeros.any() and not zeros.all():
            return None
        if finite:
            values = values[np.isfinite(values)]
        return np.unique(values).tolist()


@dataclass(frozen=True)
class RunConditions:
    """The conditions of a run's figures as columns, read once per distinct mapping:
    ``mappings`` (distinct, in order of first appearance), ``which`` (per figure, the index
    of its own), ``arrays`` (:func:`condition_arrays` of ``mappings``). ``kinds``: every key
    in order of first appearance and whether its column is text. A report's writers take a
    column per figure by ``arrays[key][which]`` (or a slice of ``which``); ``columns``
    holds every key's :class:`ConditionColumn`, read with the arrays (:meth:`column`)."""

    mappings: list[Mapping[str, object]]
    which: np.ndarray
    arrays: dict[str, np.ndarray]
    columns: dict[str, ConditionColumn] = field(default_factory=dict, repr=False,
                                                compare=False)

    def distinct_at(self, figures: Sequence[Figure], positions: np.ndarray
                    ) -> tuple[np.ndarray, np.ndarray]:
        """Of the figures at ``positions`` of ``figures`` (whose conditions these are): the
        indices of their distinct mappings in :attr:`mappings`, in order of first
        appearance, and per figure the index of its own among those. ValueError when these
        are not the conditions of ``figures``."""
        if len(self.which) != len(figures):
            raise ValueError("these conditions are not those of these figures")
        rows = self.which[positions]
        first, which = first_appearances(rows)
        return rows[first], which

    def column(self, key: str) -> ConditionColumn:
        """``key`` read from every mapping (:class:`ConditionColumn`; a key no mapping
        holds: nothing present)."""
        got = self.columns.get(key)
        if got is None:
            got = self.columns[key] = ConditionColumn.absent(len(self.mappings))
        return got

    @classmethod
    def of(cls, figures: Sequence[Figure], made: Sequence[MadeConditions] = ()
           ) -> RunConditions:
        """The conditions of ``figures``; ``made``: what :func:`conditions_records` made
        for them (a reduction's, :func:`~sweeprig.analysis.captures.conditions_noted`),
        whose mappings are read back from the columns they were made of."""
        from sweeprig.analysis.figure_block import Figures, part_conditions

        if isinstance(figures, Figures):  # (a block's column: none of its figures made)
            mappings, which = distinct_mappings(part_conditions(figures.parts))
        else:
            mappings, which = distinct_conditions(figures)
        arrays, columns = (_read_made_conditions(mappings, made) if made
                           else _read_conditions(mappings))
        return cls(mappings, which, arrays, columns)

    @property
    def kinds(self) -> dict[str, bool]:
        return {key: values.dtype == object for key, values in self.arrays.items()}


def distinct_conditions(figures: Sequence[Figure]
                         ) -> tuple[list[Mapping[str, object]], np.ndarray]:
    """The distinct conditions mappings (by identity) of ``figures`` in order of first
    appearance, and per figure the index of its own among them."""
    return distinct_mappings([f.conditions for f in figures])


def distinct_mappings(mappings: Sequence[Mapping[str, object]]
                      ) -> tuple[list[Mapping[str, object]], np.ndarray]:
    """:func:`distinct_conditions` of the mappings themselves (a list or object array)."""
    if not len(mappings):
        return [], np.zeros(0, dtype=np.int64)
    first, index = first_appearances(object_ids(mappings))
    return [mappings[i] for i in first.tolist()], index


def object_ids(objects: Sequence[object] | np.ndarray) -> np.ndarray:
    """``id`` of each of ``objects`` (uint64). An object array's are read from its buffer
    at once where the interpreter is CPython, whose ``id`` of an object is its address,
    the pointer the array holds (50 times as fast as asking each: 1.4 ms for 700k);
    anything else is asked element by element."""
    if (isinstance(objects, np.ndarray) and objects.dtype == object and objects.ndim == 1
            and sys.implementation.name == "cpython" and np.dtype(np.intp).itemsize == 8):
        held = np.ascontiguousarray(objects)  # (holds every element while read)
        if not held.size:
            return np.zeros(0, dtype=np.uint64)
        pointers = (ctypes.c_uint64 * held.size).from_address(held.ctypes.data)
        return np.frombuffer(pointers, dtype=np.uint64).copy()
    return np.fromiter(map(id, objects), dtype=np.uint64, count=len(objects))


def first_appearances(codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Of an array of codes (any comparable numbers): the position of each distinct code's
    first element, in order of first appearance, and per element the index of its code
    among them (int64)."""
    _, first, inverse = np.unique(codes, return_index=True, return_inverse=True)
    order = np.argsort(first, kind="stable")
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    return first[order], rank[inverse.ravel()]


def condition_numbers(mappings: Iterable[Mapping[str, object]], key: str, *,
                      finite: bool = True) -> list[float]:
    """The distinct numeric values of ``key`` in ``mappings``, ascending, as floats (a
    value that is not an int or a float left out; NaN and ±inf too when ``finite``). Each
    mapping is read once in C; the few distinct values are then judged one by one."""
    out = {float(v) for v in set(map(methodcaller("get", key), mappings))
           if isinstance(v, int | float) and (not finite or math.isfinite(float(v)))}
    return sorted(out)

