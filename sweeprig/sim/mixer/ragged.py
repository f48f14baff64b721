"""Spectral lines of many points at once: a ragged layout with a segment id per line.

The points of a sweep each have their own number of lines. Their lines are concatenated
into one set of arrays, and ``seg[i]`` names the point line i belongs to; every operation
here acts within a segment exactly as the one-point operation of
:mod:`sweeprig.sim.mixer.multitone` acts on a point's own lines (``merge_coincident``,
``add_lines``), so a whole sweep costs a few array operations instead of a few per point.

Units as in :class:`~sweeprig.sim.mixer.multitone.Lines`: frequencies in Hz, amplitudes
complex (whatever unit the caller uses), orders an object array of tuples.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from sweeprig.sim.mixer.multitone import MERGE_TOL_HZ


@dataclass(frozen=True)
class RaggedLines:
    """Lines of several points: ``seg`` (point index, int), ``freq_hz``, ``amp``,
    ``orders`` (order tuples, or integer codes standing for them), all of one length.
    "Sorted" means by (seg, freq_hz)."""

    seg: NDArray[np.intp]
    freq_hz: NDArray[np.float64]
    amp: NDArray[np.complex128]
    orders: NDArray[np.object_] | NDArray[np.intp]

    def take(self, index: NDArray[np.intp] | NDArray[np.bool_]) -> RaggedLines:
        """The lines at ``index`` (indices or a mask), in that order."""
        return RaggedLines(self.seg[index], self.freq_hz[index], self.amp[index],
                           self.orders[index])


def sort_order(seg: NDArray[np.intp], freq_hz: NDArray[np.float64],
               stable: bool = False) -> NDArray[np.intp]:
    """The order by (segment, frequency): a sort by frequency (stable when asked: equal
    keys keep their order; else numpy's default sort, as ``merge_coincident`` uses), then
    a stable sort by segment (a radix sort for up to 32,768 segments; several times faster
    than ``np.lexsort`` on these sizes)."""
    by_freq = np.argsort(freq_hz, kind="stable" if stable else None)
    segs = seg[by_freq]
    if seg.size and int(seg.max(initial=0)) < (1 << 15):
        segs = segs.astype(np.int16)
    return by_freq[np.argsort(segs, kind="stable")]


def sort_lines(lines: RaggedLines, stable: bool = False) -> RaggedLines:
    """Lines sorted by (segment, frequency) (see :func:`sort_order`)."""
    return lines.take(sort_order(lines.seg, lines.freq_hz, stable))


def merge_sorted(lines: RaggedLines, tol_hz: float = MERGE_TOL_HZ) -> RaggedLines:
    """:func:`merge_segments` of lines already sorted by (segment, frequency)."""
    n = lines.freq_hz.size
    if n == 0:
        return lines
    new_group = np.empty(n, dtype=bool)
    new_group[0] = True
    np.greater(np.diff(lines.freq_hz), tol_hz, out=new_group[1:])
    new_group[1:] |= lines.seg[1:] != lines.seg[:-1]
    if new_group.all():
        return lines
    starts = np.flatnonzero(new_group)
    amp = np.add.reduceat(lines.amp, starts)
    # the orders of the strongest member (the first of equal magnitudes, as argmax)
    mag = np.abs(lines.amp)
    group = np.cumsum(new_group) - 1
    strongest = np.flatnonzero(mag == np.maximum.reduceat(mag, starts)[group])
    first = np.ones(strongest.size, dtype=bool)
    first[1:] = group[strongest[1:]] != group[strongest[:-1]]
    return RaggedLines(lines.seg[starts], lines.freq_hz[starts], amp,
                       lines.orders[strongest[first]])


def merge_segments(lines: RaggedLines, tol_hz: float = MERGE_TOL_HZ) -> RaggedLines:
    """:func:`~sweeprig.sim.mixer.multitone.merge_coincident` within every segment: sort by
    frequency and add lines closer than ``tol_hz`` (a chain of such gaps is one line) as
    complex amplitudes; a merged line keeps the orders of its strongest contributor."""
    return merge_sorted(sort_lines(lines), tol_hz)


def sort_key(lines: RaggedLines) -> NDArray[np.complex128]:
    """``seg + 1j·freq``: numpy orders complex numbers by real part, then imaginary part,
    so this sorts exactly as (segment, frequency). Written into the two halves of a
    complex array (the same numbers as the arithmetic, without its temporaries)."""
    key = np.empty(lines.freq_hz.size, dtype=complex)
    key.real = lines.seg
    key.imag = lines.freq_hz
    return key


def _positions(base: RaggedLines, extra: RaggedLines, side: str,
               base_key: NDArray[np.complex128] | None = None) -> NDArray[np.intp]:
    """Where each extra line goes among the sorted ``base`` lines of its own segment, as
    ``np.searchsorted(freq, f, side)`` within the segment (an index into ``base``).

    One search over all segments, on :func:`sort_key` (``base_key``: the base's, when the
    caller has it)."""
    if base_key is None:
        base_key = sort_key(base)
    return np.searchsorted(base_key, sort_key(extra), side=side)


def _neighbours(base: RaggedLines, extra: RaggedLines,
                base_key: NDArray[np.complex128]) -> tuple[NDArray[np.intp], ...]:
    """For every extra line, the base lines of its own segment just below and at-or-above
    it (``np.searchsorted``'s ``at − 1`` and ``at``, clamped to the segment), ``at`` and the
    end of its segment's base lines. ``base`` is sorted; every segment of an extra line has
    base lines."""
    starts = np.searchsorted(base.seg, np.arange(int(base.seg[-1]) + 2))  # per segment
    first = starts[extra.seg]
    end = starts[extra.seg + 1]
    at = _positions(base, extra, "left", base_key)
    right = np.minimum(at, end - 1)
    left = np.maximum(at - 1, first)
    return left, right, at, end


def add_segments(base: RaggedLines, extra: RaggedLines, tol_hz: float = MERGE_TOL_HZ,
                 floor_w: float = 0.0, later: RaggedLines | None = None) -> RaggedLines:
    """:func:`~sweeprig.sim.mixer.multitone.add_lines` within every segment: an extra line
    within ``tol_hz`` of the nearest base line of its segment adds to it (the stronger of
    the two names the orders); the others are inserted and merged where they meet.
    ``base`` is sorted and merged; every segment of an extra line has base lines (the
    caller evaluates a point with none on its own). ``floor_w``: see :func:`_insert`."""
    if extra.freq_hz.size == 0:
        return base
    key = sort_key(base)
    left, right, _, _ = _neighbours(base, extra, key)
    freq = base.freq_hz
    use_left = np.abs(freq[left] - extra.freq_hz) < np.abs(freq[right] - extra.freq_hz)
    near = np.where(use_left, left, right)
    hit = np.abs(freq[near] - extra.freq_hz) <= tol_hz
    amp = base.amp.copy()
    orders = base.orders
    if hit.any():
        idx = near[hit]
        before = np.abs(amp[idx])
        np.add.at(amp, idx, extra.amp[hit])
        stronger = np.abs(extra.amp[hit]) > before
        if stronger.any():
            orders = orders.copy()
            orders[idx[stronger]] = extra.orders[hit][stronger]
    merged = RaggedLines(base.seg, freq, amp, orders)
    if hit.all():
        return merged
    return _insert(merged, extra.take(~hit), tol_hz, floor_w, key, later)


def _insert(merged: RaggedLines, rest: RaggedLines, tol_hz: float, floor_w: float,
            merged_key: NDArray[np.complex128],
            later: RaggedLines | None = None) -> RaggedLines:
    """Sorted lines plus lines that hit none of them (each more than ``tol_hz`` from every
    line of ``merged``): sorted (a line of ``rest`` after the ``merged`` lines at its very
    frequency, as a stable sort of the two joined), merged where they meet.

    A line of ``rest`` weaker than ``floor_w`` (|amp|², W) with no other line of ``rest``
    within ``tol_hz`` is left out: it stays a line of its own, under the floor, which the
    caller's floor drops anyway (0: keep every line); unless a line of ``later`` (lines
    the caller adds next) falls within ``tol_hz`` of it and could add to it."""
    rest = rest.take(np.lexsort((rest.freq_hz, rest.seg)))
    if floor_w > 0.0 and rest.freq_hz.size:
        alone = np.ones(rest.freq_hz.size, dtype=bool)
        near = np.diff(rest.freq_hz) <= tol_hz
        near &= rest.seg[1:] == rest.seg[:-1]
        alone[1:] &= ~near
        alone[:-1] &= ~near
        drop = (rest.amp.real * rest.amp.real + rest.amp.imag * rest.amp.imag) < floor_w
        drop &= alone
        if later is not None and later.freq_hz.size and drop.any():
            drop[drop] = ~_near_any(rest.take(drop), later, tol_hz)
        if drop.any():
            rest = rest.take(~drop)
            if rest.freq_hz.size == 0:
                return merged
    at = _positions(merged, rest, "right", merged_key)
    joined = RaggedLines(np.insert(merged.seg, at, rest.seg),
                         np.insert(merged.freq_hz, at, rest.freq_hz),
                         np.insert(merged.amp, at, rest.amp),
                         np.insert(merged.orders, at, rest.orders))
    close = np.diff(joined.freq_hz) <= tol_hz
    close &= joined.seg[1:] == joined.seg[:-1]
    return merge_sorted(joined, tol_hz) if close.any() else joined


def _near_any(lines: RaggedLines, others: RaggedLines, tol_hz: float) -> NDArray[np.bool_]:
    """Whether each line has a line of ``others`` (any order) in its segment within
    ``tol_hz``."""
    others = sort_lines(others, stable=True)
    key = sort_key(others)
    at = np.searchsorted(key, sort_key(lines))
    near = np.zeros(lines.freq_hz.size, dtype=bool)
    for j in (at - 1, at):
        ok = (j >= 0) & (j < key.size)
        jj = np.where(ok, j, 0)
        near |= ok & (others.seg[jj] == lines.seg) & (
            np.abs(others.freq_hz[jj] - lines.freq_hz) <= tol_hz)
    return near


def add_entry_segments(base: RaggedLines, extra: RaggedLines,
                       tol_hz: float = MERGE_TOL_HZ, floor_w: float = 0.0) -> RaggedLines:
    """The part's ``_add_entries`` within every segment (a few linear-path lines added to
    sorted, merged lines): an extra line within ``tol_hz`` of the base line at or above it
    adds to that one, else to the one below within ``tol_hz``; the stronger of the line so
    far and the extra names the orders, one extra after the other in their order; the
    others are inserted and the whole merged. ``base`` is sorted and merged; every segment
    of an extra line has base lines. ``floor_w``: see :func:`_insert`."""
    if extra.freq_hz.size == 0:
        return base
    key = sort_key(base)
    left, right, at, end = _neighbours(base, extra, key)
    freq = base.freq_hz
    right_ok = (at < end) & (np.abs(freq[right] - extra.freq_hz) <= tol_hz)
    left_ok = (at > left) & (np.abs(freq[left] - extra.freq_hz) <= tol_hz)
    hit = right_ok | left_ok
    near = np.where(right_ok, right, left)
    amp = base.amp.copy()
    orders = base.orders
    if hit.any():
        idx = near[hit]
        ext_amp, ext_orders = extra.amp[hit], extra.orders[hit]
        orders = orders.copy()
        if np.unique(idx).size == idx.size:
            stronger = np.abs(ext_amp) > np.abs(amp[idx])
            orders[idx[stronger]] = ext_orders[stronger]
            amp[idx] += ext_amp
        else:  # two extras on one line: one after the other, as the one-point path does
            for i, a, o in zip(idx.tolist(), ext_amp.tolist(), ext_orders, strict=True):
                if abs(a) > abs(amp[i]):
                    orders[i] = o
                amp[i] += a
    merged = RaggedLines(base.seg, freq, amp, orders)
    if hit.all():
        return merged
    return _insert(merged, extra.take(~hit), tol_hz, floor_w, key)
