"""The part's evaluation for the points of a sweep at once: a points axis through the chain.

:meth:`MixerPart.evaluate_many` hands a group of points here: one operating point and LO,
the same number of input tones at every point with the same source harmonics (dBc), only
the tones' frequencies, powers and phases changing. What is common to the group is made
once (the LO factor, the order tables, the LO's own leakage lines); the transconductor
factors of points with one grid shape are solved together; and the combination of the
factors, the output port's band edges, the merge of coincident lines, the common-mode IM2
lines, the leakage paths and the floor run on the lines of all points at once in a ragged
layout (:mod:`sweeprig.sim.mixer.ragged`: one array per quantity, a segment id per line).

Each response equals the one :meth:`MixerPart.evaluate` gives for its point alone within
rounding (``tests/sim/test_mixer_fastpath.py`` pins it at 1e-9 dB on random parts and
points); the one-point path stays the reference. Units as in :mod:`sweeprig.sim.mixer.part`.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass
from functools import lru_cache
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from sweeprig.sim.mixer.multitone import (
    MERGE_TOL_HZ,
    LoFactor,
    combo_tuples,
    order_table,
    rf_factor_rows,
    rf_grid_shape,
)
from sweeprig.sim.mixer.ragged import (
    RaggedLines,
    add_entry_segments,
    add_segments,
    merge_segments,
    merge_sorted,
)
from sweeprig.sim.mixer.realism import LeakPhase, common_mode_im2_rows
from sweeprig.sim.mixer.types import (
    MixerResponse,
    OperatingPoint,
    PortLevels,
    PortSlice,
    ToneInput,
)

if TYPE_CHECKING:
    from sweeprig.sim.mixer.part import MixerPart, PortNetwork, _LoPrepared, _OpState


class _Names:
    """The order tuples of one call's lines: the lines carry integer codes through the
    chain (cheaper to move than objects) and become tuples only for the lines kept."""

    def __init__(self) -> None:
        self._parts: list[NDArray[np.object_]] = []
        self._size = 0
        self._joined: NDArray[np.object_] | None = None

    def add(self, orders: NDArray[np.object_]) -> int:
        """Register order tuples; the code of the first (the others follow)."""
        first = self._size
        self._parts.append(orders)
        self._size += orders.size
        self._joined = None
        return first

    def table(self) -> NDArray[np.object_]:
        """Every registered order tuple, indexed by code."""
        if self._joined is None:
            self._joined = np.concatenate(self._parts) if self._parts else np.empty(
                0, dtype=object)
        return self._joined


def sweep_signature(tones: Sequence[ToneInput]) -> tuple[tuple[float, ...], ...]:
    """What the points of one group share: the source harmonics (dBc) of each tone."""
    return tuple(t.harmonics_dbc for t in tones)


def evaluate_group(
    part: MixerPart, op: OperatingPoint, lo: ToneInput | None, state: _OpState,
    sets: Sequence[tuple[ToneInput, ...]],
) -> list[MixerResponse | None]:
    """Responses of the points ``sets`` (one :func:`sweep_signature`, at least one tone
    each, a biased core: ``state.cell.i_ee_a > 0``). A point this path cannot take (no core
    line at all at its output) is None: the caller evaluates it on its own."""
    # points with the same tone frequencies side by side (they share a line table); the
    # responses go back in the caller's order at the end
    by_row: dict[tuple[float, ...], list[int]] = {}
    for i, tones in enumerate(sets):
        by_row.setdefault(tuple([t.freq_hz for t in tones]), []).append(i)
    order = [i for members in by_row.values() for i in members]
    if order != list(range(len(sets))):
        sets = [sets[i] for i in order]
    rows, at = [], 0
    for row, members in by_row.items():
        rows.append((row, list(range(at, at + len(members)))))
        at += len(members)
    responses = _evaluate_sorted(part, op, lo, state, sets, rows)
    back: list[MixerResponse | None] = [None] * len(sets)
    for i, response in zip(order, responses, strict=True):
        back[i] = response
    return back


@lru_cache(maxsize=64)
def _column_layout(
    harmonics: tuple[tuple[float, ...], ...],
) -> tuple[NDArray[np.intp], NDArray[np.float64], NDArray[np.float64], NDArray[np.intp],
           tuple[tuple[int, int], ...]]:
    """The input components of a kind of point as columns, tone after tone, fundamental
    then harmonics: each column's tone, multiple (float) and level relative to the
    fundamental (dBc), the harmonic columns, and each tone's (first, stop) columns."""
    tone, mult, dbc, spans = [], [], [], []
    for k, levels in enumerate(harmonics):
        spans.append((len(tone), len(tone) + 1 + len(levels)))
        tone += [k] * (1 + len(levels))
        mult += [float(h) for h in range(1, 2 + len(levels))]
        dbc += [0.0, *levels]
    harmonic = np.array([i for i, m in enumerate(mult) if m != 1.0], dtype=np.intp)
    arrays = (np.array(tone, dtype=np.intp), np.array(mult), np.array(dbc), harmonic)
    for arr in arrays:
        arr.flags.writeable = False
    return (*arrays, tuple(spans))


def _tone_amplitudes(
    part: MixerPart, sets: Sequence[tuple[ToneInput, ...]], freqs: NDArray[np.float64],
    powers: NDArray[np.float64],
) -> NDArray[np.float64]:
    """:meth:`MixerPart.tone_core_amplitudes` of every point, shape (P, components) in the
    columns of :func:`_column_layout` (the same arithmetic, element by element)."""
    port = part.input_port
    factor = 2.0 * port.resistance_ohm * port.delivered_fraction * 1e-3
    tone, mult, dbc, harmonic, _ = _column_layout(sweep_signature(sets[0]))
    level = powers[:, tone]
    level[:, harmonic] += dbc[harmonic]
    f = freqs[:, tone]
    f *= mult
    return np.sqrt(factor * 10.0 ** (level / 10.0)) * port.scalar_magnitudes(f)


def _bucket_rows(amps: NDArray[np.float64]) -> NDArray[np.float64]:
    """The part's ``_bucket_up`` of every amplitude (rounded up to a 1 dB grid)."""
    from sweeprig.sim.mixer.part import _AMP_BUCKET_DB

    with np.errstate(divide="ignore"):
        step = np.ceil(20.0 * np.log10(amps) / _AMP_BUCKET_DB)
    return np.where(amps > 0.0, 10.0 ** (step * _AMP_BUCKET_DB / 20.0), 0.0)


def _evaluate_sorted(
    part: MixerPart, op: OperatingPoint, lo: ToneInput | None, state: _OpState,
    sets: Sequence[tuple[ToneInput, ...]], rows: list[tuple[tuple[float, ...], list[int]]],
) -> list[MixerResponse | None]:
    """:func:`evaluate_group` for points with equal tone frequencies side by side (``rows``:
    each set of tone frequencies with its points, in their order)."""
    cell = state.cell
    lo_prep = part._lo_prepared(op, lo, state)
    n_pts, n_tones = len(sets), len(sets[0])
    n_axes = 1 + n_tones
    freqs = np.array([[t.freq_hz for t in tones] for tones in sets])  # (P, K)
    powers = np.array([[t.power_dbm for t in tones] for tones in sets])
    phases = np.array([[t.phase_rad for t in tones] for tones in sets])
    all_amps = _tone_amplitudes(part, sets, freqs, powers)
    spans = _column_layout(sweep_signature(sets[0]))[4]
    tone_amps = [np.ascontiguousarray(all_amps[:, a:b]) for a, b in spans]
    # transconductor factors, solved together per grid shape (cached per 1 dB bucket)
    x = np.empty((n_pts, len(order_table(n_tones, part.max_rf_order))), dtype=complex)
    buckets = _bucket_rows(all_amps).tolist()
    shapes: list[tuple[tuple[int, ...], bool]] = []
    by_shape: dict[tuple[int, ...], list[int]] = {}
    shape_of: dict[tuple[float, ...], tuple[tuple[int, ...], bool]] = {}  # per bucket row
    for i, row in enumerate(map(tuple, buckets)):
        shape = shape_of.get(row)
        if shape is None:
            bucket = tuple(row[a:b] for a, b in spans)
            key = ("grid", op, bucket)
            shape = part._cache.get(key)
            if shape is None:
                shape = rf_grid_shape(bucket, cell, part.max_rf_order)
                part._remember(key, shape)
            shape_of[row] = shape
        shapes.append(shape)
        by_shape.setdefault(shape[0], []).append(i)
    for shape, members in by_shape.items():
        x[members] = rf_factor_rows([a[members] for a in tone_amps], cell, part.max_rf_order,
                                    shape)
    names = _Names()
    floor_w = 1e-3 * 10.0 ** (part.floor_dbm / 10.0)  # the floor _levels applies
    core = merge_sorted(_combine(part, lo_prep, lo, state, x, freqs, phases, rows, names))
    has_core = np.zeros(n_pts, dtype=bool)
    has_core[core.seg] = True
    imbalance = part.load_mismatch + lo_prep.d0
    leaks, inputs, lo_lines = _leak_lines(part, lo, sets, freqs, powers, phases, n_axes, names)
    if leaks is not None:
        leaks = leaks.take(has_core[leaks.seg])
    if part.cm_second_order and imbalance:
        cm = _common_mode(part, state, sets, freqs, phases, all_amps, imbalance, n_axes,
                          names)
        if cm is not None:
            core = add_segments(core, cm.take(has_core[cm.seg]), floor_w=floor_w,
                                later=leaks)
    if leaks is not None:
        core = add_entry_segments(core, leaks, floor_w=floor_w)
    output = _levels(part, core, n_pts, names)
    input_levels = _levels(part, merge_segments(inputs), n_pts, names) if inputs else None
    lo_levels = _levels(part, merge_segments(lo_lines), n_pts, names) if lo_lines else None
    empty = PortLevels(np.zeros(0), np.zeros(0), np.empty(0, dtype=object))
    common = {
        "vt_v": cell.vt_v,
        "tail_current_a": cell.i_ee_a,
        "gm_s": state.gm_s,
        "conversion_gain_db": lo_prep.gain_db,
        "noise_figure_db": lo_prep.noise_figure_db,
        "lo_grid_n": float(lo_prep.factor.grid_n),
    }
    grid_notes: dict[tuple[tuple[int, ...], bool], dict[str, float]] = {}  # per grid
    for shape, converged in set(shapes):
        grid_notes[shape, converged] = {
            "rf_grid_points": float(math.prod(shape)),
            "rf_grid_n_max": float(max(shape, default=1)),
            "grid_converged": float(converged and lo_prep.factor.converged),
        }
    responses: list[MixerResponse | None] = []
    for i, has in enumerate(has_core.tolist()):
        if not has:
            responses.append(None)
            continue
        notes = dict(common)
        notes.update(grid_notes[shapes[i]])
        responses.append(MixerResponse(
            if_port=output[i],
            rf_port=input_levels[i] if input_levels is not None else empty,
            lo_port=lo_levels[i] if lo_levels is not None else empty,
            if_noise_dbm_per_hz=lo_prep.noise_dbm_per_hz,
            supply_current_a=state.supply_current_a,
            notes=notes,
        ))
    return responses


def _sorted_table(
    fac_orders: NDArray[np.int64], lo_freq: float, rf_row: NDArray[np.float64],
    n_orders: int, out: PortNetwork | None,
) -> tuple[NDArray[np.float64], NDArray[np.intp], NDArray[np.intp], NDArray[np.bool_],
           NDArray[np.float64] | None]:
    """The frequencies of every (LO order, RF order) pair of one set of tone frequencies
    (``rf_row[r]``: Σ n_k·f_k of RF order r), sorted (a stable sort: pairs at one
    frequency keep their table order), with the pairs' LO and RF indices in that order,
    where the RF order is zero, and the output port's band-edge magnitude there (None
    without band edges)."""
    freq = np.add.outer(fac_orders * lo_freq, rf_row).ravel()
    order = np.argsort(freq, kind="stable")
    li, pi = np.divmod(order, n_orders)
    freq = freq[order]
    band = None if out is None else out.magnitude(freq)
    for arr in (freq, li, pi, band):
        if arr is not None:
            arr.flags.writeable = False
    zero = pi == 0
    zero.flags.writeable = False
    return freq, li, pi, zero, band


@dataclass(frozen=True)
class _TableFactors:
    """The LO factor read along a sorted table (see :func:`_sorted_table`) for one LO
    factor, tail current and LO phase: ``abs_s``/``abs_d`` (|S_m|, |D_m| of each entry's
    LO order), ``s``/``d`` (S_m·I_EE, D_m·I_EE turned by the LO phase), ``codes`` (the
    entry's order tuple in :func:`combo_tuples`' flat table), ``zero_at`` (the entries of
    RF order zero), ``positive`` (the entries above the merge tolerance in frequency)."""

    factor: LoFactor
    i_ee_a: float
    lo_phase_rad: float
    abs_s: NDArray[np.float64]
    abs_d: NDArray[np.float64]
    s: NDArray[np.complex128]
    d: NDArray[np.complex128]
    codes: NDArray[np.intp]
    zero_at: NDArray[np.intp]
    positive: NDArray[np.bool_]


def _table_factors(
    part: MixerPart, key: tuple[Any, ...], table: tuple[NDArray, ...], fac: LoFactor,
    s: NDArray[np.complex128], d: NDArray[np.complex128], i_ee: float, lo_phase: float,
    n_rf_orders: int,
) -> _TableFactors:
    """:class:`_TableFactors` of a table, cached beside it while the LO factor, tail current
    and LO phase stay (a power sweep's points share them)."""
    pkey = ("factors", key)
    prep = part._tables.get(pkey)
    if (prep is not None and prep.factor is fac and prep.i_ee_a == i_ee
            and prep.lo_phase_rad == lo_phase):
        return prep
    freq_u, li_u, pi_u, zero_u, _ = table
    codes = (fac.orders + part.max_lo_order)[li_u] * n_rf_orders + pi_u
    prep = _TableFactors(fac, i_ee, lo_phase, fac.abs_s[li_u], fac.abs_d[li_u], s[li_u],
                         d[li_u], codes, zero_u.nonzero()[0], freq_u > MERGE_TOL_HZ)
    part._remember_table(pkey, prep)
    return prep


def _entries_within(
    abs_x: NDArray[np.float64], fac: LoFactor, table: tuple[NDArray, ...],
    prep: _TableFactors, limit: float, near_limit: float,
) -> NDArray[np.intp]:
    """The entries of a sorted table (see :func:`_sorted_table`) that a point with
    |X_n| = ``abs_x`` (shape (R,)) makes into lines: bound above ``limit``, frequency
    above the merge tolerance, bound through the band edges at least ``near_limit``."""
    _, _, pi_u, _, band_u = table
    bound = abs_x[pi_u]
    bound *= prep.abs_s
    if fac.has_d:
        bound[prep.zero_at] += prep.abs_d[prep.zero_at]
    ok = bound > limit
    ok &= prep.positive
    if band_u is not None:
        bound *= band_u
        ok &= bound >= near_limit
    return ok.nonzero()[0]


def _combine(
    part: MixerPart, lo_prep: _LoPrepared, lo: ToneInput | None, state: _OpState,
    x: NDArray[np.complex128], freqs: NDArray[np.float64], phases: NDArray[np.float64],
    rows: list[tuple[tuple[float, ...], list[int]]], names: _Names,
) -> RaggedLines:
    """:func:`~sweeprig.sim.mixer.multitone.combine` for every point (rows of ``x``), with
    the part's pruning limit, scaled to sqrt(W) at the output port and through its band
    edges (the lines these push 20 dB under the floor dropped, as the one-point path
    does). The lines come out sorted by (point, frequency), not yet merged.

    The points that share their tone frequencies share the table of line frequencies and
    band-edge magnitudes, sorted once: each point's lines are the entries of that table
    its factors make strong enough, read in the table's order, so no sort per point."""
    fac = lo_prep.factor
    cell = state.cell
    i_ee = cell.i_ee_a
    lo_freq = lo.freq_hz if lo is not None else 0.0
    lo_phase = lo.phase_rad if lo is not None else 0.0
    orders = order_table(freqs.shape[1], part.max_rf_order)  # (R, K)
    n_orders = orders.shape[0]
    limit = state.min_abs_a / i_ee
    rf_f = freqs @ orders.T.astype(float)  # (P, R): Σ n_k·f_k, as combine's orders @ f
    out = part.output_port
    banded = out.highpass_hz is not None or out.lowpass_hz is not None
    # |line| ≤ I_EE·bound (bound = |S_m|·|X_n| + |D_m|·[n = 0]), so a line whose bound
    # through the band edges is under the pre-floor (with a margin for rounding) is one
    # the one-point path drops too
    near_limit = math.sqrt(state.prefloor_w * (1.0 - 1e-9)) / (i_ee * state.out_scale)
    abs_x = np.abs(x)
    s = fac.s * i_ee
    d = fac.d * i_ee
    if lo_phase:
        turn = np.exp(1j * lo_phase * fac.orders)
        s, d = s * turn, d * turn
    if phases.any():
        x = x * np.exp(1j * (phases @ orders.T.astype(float)))
    table = combo_tuples(part.max_lo_order, freqs.shape[1], part.max_rf_order)
    parts = []
    next_point = 0
    for row, point_list in rows:
        if point_list != list(range(next_point, next_point + len(point_list))):
            raise ValueError("points with equal tone frequencies must be consecutive")
        next_point += len(point_list)
        members = np.array(point_list)
        key = (lo_freq, row, fac.orders.tobytes(), part.max_rf_order)
        table_u = part._tables.get(key)
        if table_u is None:
            table_u = _sorted_table(fac.orders, lo_freq, rf_f[point_list[0]], n_orders,
                                    out if banded else None)
            part._remember_table(key, table_u)
        freq_u, _, pi_u, _, band_u = table_u
        prep = _table_factors(part, key, table_u, fac, s, d, i_ee, lo_phase, table.shape[1])
        ax = abs_x[members]
        # the table entries that the strongest of these points could make (each point's
        # bound is at most the bound of the largest |X_n| among them: rounding is monotone)
        cand = _entries_within(ax.max(axis=0), fac, table_u, prep, limit, near_limit)
        pc = pi_u[cand]
        bound = ax[:, pc]
        bound *= prep.abs_s[cand]
        if fac.has_d:
            zero_c = (pc == 0).nonzero()[0]
            if zero_c.size:
                bound[:, zero_c] += prep.abs_d[cand[zero_c]]
        ok = bound > limit
        if band_u is not None:
            bound *= band_u[cand]
            ok &= bound >= near_limit
        pp, jj = ok.nonzero()
        j = cand[jj]
        seg_g = members[pp]
        pi_g = pc[jj]
        amp_g = prep.s[j] * x[seg_g, pi_g]
        if fac.has_d:
            at_zero = (pi_g == 0).nonzero()[0]
            if at_zero.size:
                amp_g[at_zero] += prep.d[j[at_zero]]
        parts.append((seg_g, freq_u[j], amp_g, prep.codes[j],
                      band_u[j] if band_u is not None else None))
    # the groups are runs of consecutive points (evaluate_group put them so): joined, the
    # lines are in point order, each point's in frequency order (its table's)
    seg, freq, amp, codes = (np.concatenate([p[c] for p in parts]) for c in range(4))
    band = np.concatenate([p[4] for p in parts]) if banded else None
    amp *= state.out_scale
    if band is not None:
        amp *= band
        keep = (amp.real * amp.real + amp.imag * amp.imag) >= state.prefloor_w
        if not keep.all():
            seg, freq, amp, codes = seg[keep], freq[keep], amp[keep], codes[keep]
    codes += names.add(table.ravel())
    return RaggedLines(seg, freq, amp, codes)


def _common_mode(
    part: MixerPart, state: _OpState, sets: Sequence[tuple[ToneInput, ...]],
    freqs: NDArray[np.float64], phases: NDArray[np.float64], v: NDArray[np.float64],
    imbalance: float, n_axes: int, names: _Names,
) -> RaggedLines | None:
    """The common-mode IM2 lines of every point, at the output port (sqrt(W)); ``v``: the
    input components at the core (:func:`_tone_amplitudes`)."""
    cell = state.cell
    tone, mult, _, _, spans = _column_layout(sweep_signature(sets[0]))
    layout = tuple(b - a for a, b in spans)
    a_v = 2.0 * cell.vt_v + cell.i_ee_a * cell.r_e_ohm
    f = freqs[:, tone]
    f *= mult
    ph = phases[:, tone]
    ph *= mult
    cm = common_mode_im2_rows(f, v, ph, layout, n_axes, cell.i_ee_a, a_v,
                               part.cm_second_order, imbalance)
    if cm is None:
        return None
    seg, freq, amp, codes, orders = cm
    amp = amp * state.out_scale
    out = part.output_port
    if out.highpass_hz is not None or out.lowpass_hz is not None:
        amp = amp * out.magnitude(freq)
    codes += names.add(orders)
    return RaggedLines(seg, freq, amp, codes)


@dataclass(frozen=True)
class _LeakLayout:
    """Where the linear paths' lines of one kind of point sit (see :func:`_leak_layout`).

    ``specs``: the tone paths (loss dB, path phase, slope), each over every tone and its
    harmonics; the columns of their lines, path after path, tone after tone, harmonic after
    harmonic: ``tone`` (tone index), ``root`` (index of the (path, tone) fundamental level),
    ``mult`` (the harmonic's multiple, float), ``rel`` (the harmonic's level relative to
    the fundamental through the path, as the one-point path computes it). ``turn``: the
    columns whose path turns the phase, with that path's offset and delay per column.
    ``ports``: per port (output, input, LO), its blocks in the one-point path's order:
    ``("tones", first, stop)`` (columns of the tone paths) or ``("lo", path name)``."""

    specs: tuple[tuple[float, LeakPhase | None, tuple[float, float]], ...]
    tone: NDArray[np.intp]
    root: NDArray[np.intp]
    mult: NDArray[np.float64]
    rel: NDArray[np.float64]
    orders: NDArray[np.object_]
    turn: NDArray[np.intp]
    turn_phase: NDArray[np.float64]
    turn_delay: NDArray[np.float64]
    ports: tuple[tuple[tuple[Any, ...], ...], ...]


def _leak_layout(part: MixerPart, harmonics: tuple[tuple[float, ...], ...], has_lo: bool,
                 n_axes: int) -> _LeakLayout:
    """The columns of the linear paths' lines for points whose tones carry ``harmonics``
    (dBc per tone), cached per part: the paths and their order are the one-point path's
    (``MixerPart._evaluate``)."""
    from sweeprig.sim.mixer.part import _unit_orders

    key = ("leak-layout", harmonics, has_lo, n_axes)
    layout = part._cache.get(key)
    if layout is not None:
        return layout
    phs = part.leakage_phases
    specs: list[tuple[float, LeakPhase | None, tuple[float, float]]] = []
    tone, root, mult, rel, orders = [], [], [], [], []
    turn, turn_phase, turn_delay = [], [], []

    def tone_block(loss_db: float, path: LeakPhase | None,
                   slope: tuple[float, float] = (0.0, 1.0)) -> tuple[str, int, int]:
        first = len(tone)
        s = len(specs)
        specs.append((loss_db, path, slope))
        turns = path is not None and (path.phase_rad or path.delay_s)
        for k, dbcs in enumerate(harmonics):
            extra = [slope[0] * math.log2(h) for h in range(2, 2 + len(dbcs))] if slope[0] \
                else [0.0] * len(dbcs)
            levels = [1.0] + [10.0 ** ((dbc - e) / 20.0) for dbc, e in zip(dbcs, extra,
                                                                             strict=True)]
            for h, level in enumerate(levels, start=1):
                if turns:
                    turn.append(len(tone))
                    turn_phase.append(path.phase_rad)  # type: ignore[union-attr]
                    turn_delay.append(path.delay_s)  # type: ignore[union-attr]
                tone.append(k)
                root.append(s * len(harmonics) + k)
                mult.append(float(h))
                rel.append(level)
                orders.append(_unit_orders(n_axes, 1 + k, h))
        return ("tones", first, len(tone))

    output: list[tuple[Any, ...]] = []
    inputs: list[tuple[Any, ...]] = []
    lo_port: list[tuple[Any, ...]] = []
    if part.isolation_rf_if_db is not None:
        output.append(tone_block(part.isolation_rf_if_db, phs.rf_to_if,
                                 part._iso_slope("rf_if")))
    if has_lo and part.isolation_lo_to_output_db is not None:
        output.append(("lo", "output"))
    if has_lo and part.isolation_lo_to_input_db is not None:
        inputs.append(("lo", "input"))
    if part.input_port.return_loss_db is not None:
        inputs.append(tone_block(part.input_port.return_loss_db, phs.input_reflection))
    if has_lo and part.lo_port.return_loss_db is not None:
        lo_port.append(("lo", "reflection"))
    if part.isolation_rf_lo_db is not None:
        lo_port.append(tone_block(part.isolation_rf_lo_db, phs.rf_to_lo,
                                  part._iso_slope("rf_lo")))
    object_orders = np.empty(len(orders), dtype=object)
    object_orders[:] = orders
    layout = _LeakLayout(
        tuple(specs), np.array(tone, dtype=np.intp), np.array(root, dtype=np.intp),
        np.array(mult, dtype=float), np.array(rel, dtype=float), object_orders,
        np.array(turn, dtype=np.intp), np.array(turn_phase, dtype=float),
        np.array(turn_delay, dtype=float), (tuple(output), tuple(inputs), tuple(lo_port)))
    part._remember(key, layout)
    return layout


def _tone_path_lines(
    layout: _LeakLayout, freqs: NDArray[np.float64], powers: NDArray[np.float64],
    phases: NDArray[np.float64],
) -> tuple[NDArray[np.float64], NDArray[np.complex128]]:
    """The part's ``_tone_entries`` of every tone path, tone and harmonic at every point
    (the columns of ``layout``): frequencies and sqrt(W) amplitudes, shape (P, columns).
    Element by element the one-point path's arithmetic (the fundamental's level through
    each path, the harmonics' relative levels, phases h·φ, the path's turn)."""
    n_tones = freqs.shape[1]
    loss = np.empty((freqs.shape[0], len(layout.specs) * n_tones))
    for s, (loss_db, _, slope) in enumerate(layout.specs):
        block = loss[:, s * n_tones : (s + 1) * n_tones]
        if slope[0]:
            block[...] = loss_db + slope[0] * np.log2(freqs / slope[1])
        else:
            block[...] = loss_db
    root_w = 10.0 ** ((np.tile(powers, len(layout.specs)) - loss - 30.0) / 20.0)
    mag = root_w[:, layout.root]
    mag *= layout.rel
    ang = phases[:, layout.tone]
    ang *= layout.mult
    amp = mag * np.cos(ang) + 1j * (mag * np.sin(ang))
    f = freqs[:, layout.tone]
    f *= layout.mult
    if layout.turn.size:
        amp[:, layout.turn] *= np.exp(1j * (layout.turn_phase - 2.0 * math.pi
                                            * f[:, layout.turn] * layout.turn_delay))
    return f, amp


def _lo_path_entries(part: MixerPart, lo: ToneInput, n_axes: int, which: str) -> list[Any]:
    """The LO's own lines through one of its linear paths (``which``: ``"output"``,
    ``"input"`` or ``"reflection"``), as the one-point path makes them."""
    from sweeprig.sim.mixer.part import _tone_entries

    phs = part.leakage_phases
    down = part.conversion == "down"
    if which == "output":
        return _tone_entries(lo, 0, n_axes, part.isolation_lo_to_output_db,  # type: ignore[arg-type]
                             phs.lo_to_if if down else phs.lo_to_rf,
                             part._iso_slope("lo_if" if down else "lo_rf"))
    if which == "input":
        return _tone_entries(lo, 0, n_axes, part.isolation_lo_to_input_db,  # type: ignore[arg-type]
                             phs.lo_to_rf if down else phs.lo_to_if,
                             part._iso_slope("lo_rf" if down else "lo_if"))
    return _tone_entries(lo, 0, n_axes, part.lo_port.return_loss_db,  # type: ignore[arg-type]
                         phs.lo_reflection)


def _leak_lines(
    part: MixerPart, lo: ToneInput | None, sets: Sequence[tuple[ToneInput, ...]],
    freqs: NDArray[np.float64], powers: NDArray[np.float64], phases: NDArray[np.float64],
    n_axes: int, names: _Names,
) -> tuple[RaggedLines | None, RaggedLines | None, RaggedLines | None]:
    """The linear paths' lines of every point, unmerged, at the output port (input→output,
    LO→output), the input port (LO→input, the input reflection) and the LO port (its
    reflection, input→LO), each point's in the order the one-point path adds them; None
    for a port with no path."""
    layout = _leak_layout(part, sweep_signature(sets[0]), lo is not None, n_axes)
    n_pts = len(sets)
    f_tones, amp_tones = (None, None) if not layout.specs else _tone_path_lines(
        layout, freqs, powers, phases)
    out: list[RaggedLines | None] = []
    for blocks in layout.ports:
        if not blocks:
            out.append(None)
            continue
        pieces = []
        for block in blocks:
            if block[0] == "tones":
                pieces.append((block[1], block[2], None))
            else:
                key = ("lo-path", lo, n_axes, block[1])
                entries = part._cache.get(key)
                if entries is None:
                    entries = _lo_path_entries(part, lo, n_axes, block[1])  # type: ignore[arg-type]
                    part._remember(key, entries)
                pieces.append((0, 0, entries))
        width = sum(b - a if e is None else len(e) for a, b, e in pieces)
        freq = np.empty((n_pts, width))
        amp = np.empty((n_pts, width), dtype=complex)
        orders = np.empty(width, dtype=object)
        at = 0
        for a, b, entries in pieces:
            if entries is None:
                freq[:, at : at + b - a] = f_tones[:, a:b]  # type: ignore[index]
                amp[:, at : at + b - a] = amp_tones[:, a:b]  # type: ignore[index]
                orders[at : at + b - a] = layout.orders[a:b]
                at += b - a
            else:
                n = len(entries)
                freq[:, at : at + n] = [e[0] for e in entries]
                amp[:, at : at + n] = [e[1] for e in entries]
                orders[at : at + n] = [e[2] for e in entries]
                at += n
        seg, column = _grid_indices(n_pts, width)
        out.append(RaggedLines(seg, freq.ravel(), amp.ravel(), column + names.add(orders)))
    return out[0], out[1], out[2]


@lru_cache(maxsize=64)
def _grid_indices(n_pts: int, width: int) -> tuple[NDArray[np.intp], NDArray[np.intp]]:
    """The point and the column of every element of a (points, width) block read row by
    row (read-only, shared by the calls of one size)."""
    seg = np.repeat(np.arange(n_pts), width)
    column = np.tile(np.arange(width), n_pts)
    for arr in (seg, column):
        arr.flags.writeable = False
    return seg, column


def _levels(part: MixerPart, lines: RaggedLines, n_pts: int,
            names: _Names) -> list[PortSlice]:
    """Sorted, merged lines of every point (orders as codes of ``names``) → each point's
    lines above the floor (dBm), as slices of arrays the points share."""
    power_w = lines.amp.real**2 + lines.amp.imag**2
    keep = power_w >= 1e-3 * 10.0 ** (part.floor_dbm / 10.0)  # as part._levels
    keep &= power_w > 0.0
    seg, freq, codes = lines.seg, lines.freq_hz, lines.orders
    if not keep.all():
        power_w, seg, freq, codes = power_w[keep], seg[keep], freq[keep], codes[keep]
    power_dbm = 10.0 * np.log10(power_w * 1e3)
    at = np.searchsorted(seg, np.arange(n_pts + 1)).tolist()
    table = names.table()
    new = tuple.__new__
    return [new(PortSlice, (freq, power_dbm, codes, table, a, b))
            for a, b in itertools.pairwise(at)]
