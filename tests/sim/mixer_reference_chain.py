"""The one-point evaluation's output chain as it was before the issue 14 speed-ups (kept as
the reference of ``tests/sim/test_mixer_fastpath.py``): the combination weighs the
reachable RF orders only, the lines carry their orders as tuples from the start, the
common-mode lines and the leakage entries are made and added afresh for every point, and
every port's products are made at once. The factors, the input amplitudes and the leakage
entries come from the part itself (the same functions the fast path calls), so the two
differ only in how the lines are combined, merged and kept.

A test helper, not a test module: the code is the model's before the speed-ups, line for
line, apart from names.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from sweeprig.sim.mixer.multitone import (
    MERGE_TOL_HZ,
    PRUNE_REL,
    Lines,
    LoFactor,
    RfFactor,
    combo_tuples,
    rf_factor,
)
from sweeprig.sim.mixer.part import (
    MixerPart,
    _entries_to_lines,
    _entries_to_products,
    _tone_entries,
)
from sweeprig.sim.mixer.realism import _cm_layout
from sweeprig.sim.mixer.types import MixerResponse, OperatingPoint, PortLevels, ToneInput


def combine(lo: LoFactor, lo_freq_hz: float, lo_phase_rad: float, rf: RfFactor,
            rf_freqs_hz: Sequence[float], rf_phases_rad: Sequence[float], i_ee_a: float,
            max_lo_order: int, max_rf_order: int, min_abs_a: float | None = None) -> Lines:
    k = rf.orders.shape[1]
    if i_ee_a <= 0.0:
        return Lines(np.zeros(0), np.zeros(0, dtype=complex), np.empty(0, dtype=object))
    if min_abs_a is None:
        limit = PRUNE_REL * (lo.max_s * float(rf.abs_x.max()) + lo.max_d)
    else:
        limit = min_abs_a / i_ee_a
    x, abs_x, orders, index = rf.x, rf.abs_x, rf.orders, rf.index
    reach = abs_x * lo.max_s > limit
    reach[0] = True
    if not reach.all():
        rows = reach.nonzero()[0]
        x, abs_x, orders, index = x[rows], abs_x[rows], orders[rows], index[rows]
    bound = np.multiply.outer(lo.abs_s, abs_x)
    if lo.has_d:
        bound[:, 0] += lo.abs_d
    lo_f = lo.orders * lo_freq_hz
    freq = np.add.outer(lo_f, orders @ np.asarray(rf_freqs_hz, dtype=float)) if k else lo_f[:, None]
    mask = bound > limit
    mask &= freq > MERGE_TOL_HZ
    flat = mask.ravel().nonzero()[0]
    li, pi = np.divmod(flat, abs_x.size)
    s = lo.s * i_ee_a
    if lo_phase_rad:
        s = s * np.exp(1j * lo_phase_rad * lo.orders)
    if k and any(rf_phases_rad):
        x = x * np.exp(1j * (orders @ np.asarray(rf_phases_rad, dtype=float)))
    amp = s[li] * x[pi]
    if lo.has_d:
        at_zero = (pi == 0).nonzero()[0]
        if at_zero.size:
            d = lo.d * i_ee_a
            if lo_phase_rad:
                d = d * np.exp(1j * lo_phase_rad * lo.orders)
            amp[at_zero] += d[li[at_zero]]
    table = combo_tuples(max_lo_order, k, max_rf_order)
    codes = (lo.orders + max_lo_order)[li] * table.shape[1] + index[pi]
    return Lines(freq.ravel()[flat], amp, table.ravel()[codes])


def merge_coincident(lines: Lines, tol_hz: float = MERGE_TOL_HZ) -> Lines:
    if lines.freq_hz.size == 0:
        return lines
    order = np.argsort(lines.freq_hz)
    freq = lines.freq_hz[order]
    new_group = np.empty(freq.size, dtype=bool)
    new_group[0] = True
    np.greater(np.diff(freq), tol_hz, out=new_group[1:])
    if new_group.all():
        return Lines(freq, lines.amp[order], lines.orders[order])
    amp = lines.amp[order]
    orders = lines.orders[order]
    starts = np.flatnonzero(new_group)
    ends = np.append(starts[1:], freq.size)
    merged_amp = amp[starts]
    merged_orders = orders[starts]
    for g in np.flatnonzero(ends - starts > 1).tolist():
        seg = amp[starts[g] : ends[g]]
        merged_amp[g] = seg.sum()
        merged_orders[g] = orders[starts[g] + int(np.argmax(np.abs(seg)))]
    return Lines(freq[starts], merged_amp, merged_orders)


def concat_lines(parts: Sequence[Lines]) -> Lines:
    return Lines(np.concatenate([p.freq_hz for p in parts]),
                 np.concatenate([p.amp for p in parts]),
                 np.concatenate([p.orders for p in parts]))


def add_lines(base: Lines, extra: Lines, tol_hz: float = MERGE_TOL_HZ) -> Lines:
    if extra.freq_hz.size == 0:
        return base
    freq = base.freq_hz
    if freq.size == 0:
        return extra
    at = np.searchsorted(freq, extra.freq_hz)
    right = np.minimum(at, freq.size - 1)
    left = np.maximum(at - 1, 0)
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
    merged = Lines(freq, amp, orders)
    if hit.all():
        return merged
    rest = ~hit
    joined = concat_lines([merged, Lines(extra.freq_hz[rest], extra.amp[rest],
                                         extra.orders[rest])])
    order = np.argsort(joined.freq_hz, kind="stable")
    joined = Lines(joined.freq_hz[order], joined.amp[order], joined.orders[order])
    if np.any(np.diff(joined.freq_hz) <= tol_hz):
        return merge_coincident(joined, tol_hz)
    return joined


def common_mode_im2_lines(freq_hz, amp_v, phase_rad, harmonics_per_tone,  # type: ignore[no-untyped-def]
                          n_axes, i_ee_a, a_v, cm_second_order, imbalance):
    k = cm_second_order * i_ee_a * imbalance / (2.0 * a_v * a_v)
    if k == 0.0 or freq_hz.size == 0:
        return None
    iu, ju, sq_o, sum_o, dpos_o, dneg_o = _cm_layout(harmonics_per_tone, n_axes)
    pair = k * amp_v[iu] * amp_v[ju]
    diff = freq_hz[iu] - freq_hz[ju]
    pos = diff >= 0.0
    far = np.abs(diff) > 1e-3
    freq = np.concatenate([2.0 * freq_hz, freq_hz[iu] + freq_hz[ju], np.abs(diff[far])])
    mag = np.concatenate([0.5 * k * amp_v * amp_v, pair, pair[far]])
    phase = np.concatenate([
        2.0 * phase_rad, phase_rad[iu] + phase_rad[ju],
        np.where(pos, 1.0, -1.0)[far] * (phase_rad[iu] - phase_rad[ju])[far]])
    orders = np.concatenate([sq_o, sum_o, np.where(pos, dpos_o, dneg_o)[far]])
    amp = mag * np.exp(1j * phase)
    return freq, amp, orders


def add_entries(lines: Lines, entries: list) -> Lines:  # type: ignore[type-arg]
    freq = lines.freq_hz
    amp = lines.amp.copy()
    orders = lines.orders.copy()
    where = np.searchsorted(freq, [e[0] for e in entries]).tolist()
    extra = []
    for (f, a, o), i in zip(entries, where, strict=True):
        hit = -1
        if i < freq.size and abs(freq[i] - f) <= MERGE_TOL_HZ:
            hit = i
        elif i > 0 and abs(freq[i - 1] - f) <= MERGE_TOL_HZ:
            hit = i - 1
        if hit < 0:
            extra.append((f, a, o))
            continue
        if abs(a) > abs(amp[hit]):
            orders[hit] = o
        amp[hit] += a
    merged = Lines(freq, amp, orders)
    if extra:
        merged = merge_coincident(concat_lines([merged, _entries_to_lines(extra)]))
    return merged


def levels(part: MixerPart, lines: Lines) -> PortLevels:
    power_w = lines.amp.real**2 + lines.amp.imag**2
    keep = power_w >= 1e-3 * 10.0 ** (part.floor_dbm / 10.0)
    if not keep.all():
        power_w = power_w[keep]
        lines = Lines(lines.freq_hz[keep], lines.amp[keep], lines.orders[keep])
    return PortLevels(lines.freq_hz, 10.0 * np.log10(power_w * 1e3), lines.orders)


def reference_response(part: MixerPart, op: OperatingPoint, lo: ToneInput | None,
                       rf: Sequence[ToneInput]) -> MixerResponse:
    """``part.evaluate(op, lo, rf)`` through the chain as it was before the speed-ups."""
    self, tones = part, tuple(rf)
    self._check_inputs(lo, tones)
    state = self._state(op)
    cell = state.cell
    lo_prep = self._lo_prepared(op, lo, state)
    inp, out = self.input_port, self.output_port
    if tones:
        amps = tuple(self.tone_core_amplitudes(t, inp) for t in tones)
        shape, converged = self._rf_shape(op, amps, cell)
        rf_fac = rf_factor(amps, cell, self.max_rf_order, shape)
    else:
        amps = ()
        shape, converged, rf_fac = (), True, state.no_rf
    core = combine(
        lo_prep.factor, lo.freq_hz if lo is not None else 0.0,
        lo.phase_rad if lo is not None else 0.0, rf_fac, [t.freq_hz for t in tones],
        [t.phase_rad for t in tones], cell.i_ee_a, self.max_lo_order, self.max_rf_order,
        state.min_abs_a,
    )
    n_axes = 1 + len(tones)
    amp = core.amp * state.out_scale
    if out.highpass_hz is not None or out.lowpass_hz is not None:
        amp *= out.magnitude(core.freq_hz)
        keep = (amp.real * amp.real + amp.imag * amp.imag) >= state.prefloor_w
        core = Lines(core.freq_hz[keep], amp[keep], core.orders[keep])
    else:
        core = Lines(core.freq_hz, amp, core.orders)
    core = merge_coincident(core)
    imbalance = self.load_mismatch + lo_prep.d0
    if tones and self.cm_second_order and imbalance:
        cm = common_mode_im2_lines(
            np.array([h * t.freq_hz for t, a in zip(tones, amps, strict=True)
                      for h in range(1, len(a) + 1)]),
            np.array([v for a in amps for v in a]),
            np.array([h * t.phase_rad for t, a in zip(tones, amps, strict=True)
                      for h in range(1, len(a) + 1)]),
            tuple(len(a) for a in amps), n_axes, cell.i_ee_a,
            2.0 * cell.vt_v + cell.i_ee_a * cell.r_e_ohm, self.cm_second_order, imbalance,
        )
        if cm is not None:
            cm_freq, cm_amp, cm_orders = cm
            cm_amp = cm_amp * state.out_scale
            if out.highpass_hz is not None or out.lowpass_hz is not None:
                cm_amp = cm_amp * out.magnitude(cm_freq)
            core = add_lines(core, Lines(cm_freq, cm_amp, cm_orders))
    phases = self.leakage_phases
    in_entries: list = []  # type: ignore[type-arg]
    lo_entries: list = []  # type: ignore[type-arg]
    leaks: list = []  # type: ignore[type-arg]
    iso = self.isolation_rf_if_db
    if iso is not None:
        for k, t in enumerate(tones):
            leaks += _tone_entries(t, 1 + k, n_axes, iso, phases.rf_to_if,
                                   self._iso_slope("rf_if"))
    iso = self.isolation_lo_to_output_db
    if lo is not None and iso is not None:
        path = phases.lo_to_if if self.conversion == "down" else phases.lo_to_rf
        leaks += _tone_entries(lo, 0, n_axes, iso, path, self._iso_slope(
            "lo_if" if self.conversion == "down" else "lo_rf"))
    if leaks:
        core = add_entries(core, leaks)
    iso = self.isolation_lo_to_input_db
    if lo is not None and iso is not None:
        path = phases.lo_to_rf if self.conversion == "down" else phases.lo_to_if
        in_entries += _tone_entries(lo, 0, n_axes, iso, path, self._iso_slope(
            "lo_rf" if self.conversion == "down" else "lo_if"))
    if inp.return_loss_db is not None:
        for k, t in enumerate(tones):
            in_entries += _tone_entries(t, 1 + k, n_axes, inp.return_loss_db,
                                        phases.input_reflection)
    if lo is not None and self.lo_port.return_loss_db is not None:
        lo_entries += _tone_entries(lo, 0, n_axes, self.lo_port.return_loss_db,
                                    phases.lo_reflection)
    iso = self.isolation_rf_lo_db
    if iso is not None:
        for k, t in enumerate(tones):
            lo_entries += _tone_entries(t, 1 + k, n_axes, iso, phases.rf_to_lo,
                                        self._iso_slope("rf_lo"))
    return MixerResponse(
        if_port=levels(self, core),
        rf_port=_entries_to_products(in_entries, self.floor_dbm),
        lo_port=_entries_to_products(lo_entries, self.floor_dbm),
        if_noise_dbm_per_hz=lo_prep.noise_dbm_per_hz,
        supply_current_a=state.supply_current_a,
        notes={
            "vt_v": cell.vt_v,
            "tail_current_a": cell.i_ee_a,
            "gm_s": state.gm_s,
            "conversion_gain_db": lo_prep.gain_db,
            "noise_figure_db": lo_prep.noise_figure_db,
            "lo_grid_n": float(lo_prep.factor.grid_n),
            "rf_grid_points": float(math.prod(shape)),
            "rf_grid_n_max": float(max(shape, default=1)),
            "grid_converged": float(converged and lo_prep.factor.converged),
        },
    )
