"""The model's faster paths against its reference paths: same figures within numerical noise.

The speed-ups (issue 14, item 5) change how the model computes, never what: a guessed LO grid
must land on the grid the plain doubling stops at, the in-place Newton solver of the pair
must find the same root as the plain one (kept below as the reference), and a part whose
caches are warm from a sweep must give the lines a fresh part gives for each point alone.
Random parameters (seeded) over the ranges the shipped parts and the sim benches use.
"""

from __future__ import annotations

import copy
import math
import pickle

import numpy as np
import pytest

from sweeprig.sim.mixer import OperatingPoint, ToneInput, load_part
from sweeprig.sim.mixer.core import pair_angle, thermal_voltage_v
from sweeprig.sim.mixer.multitone import (
    CellState,
    LoFactor,
    _axis_wave,
    _fold_half,
    _lo_factor_from_spectra,
    _mirrored,
    _rf_grid_values,
    lo_factor,
)
from tests.sim.mixer_reference_chain import reference_response

#: Power difference allowed between a fast and a reference line, dB (issue 14's figure).
TOL_DB = 1e-9
#: Frequency difference allowed, Hz: a line at m·f_LO + Σ n_k·f_k is a small difference of
#: large multiples (up to 9 × 6 GHz), so its rounding is about 1e-16 of those, ~1e-6 Hz
#: (a vectorised product may round once where a plain one rounds twice, IEEE 754 FMA);
#: far below the 1e-3 Hz at which two lines count as one.
FREQ_TOL_HZ = 1e-5
#: Lines this far below the strongest line of their port are compared in amplitude instead:
#: rounding in the FFT (about 1e-16 of the strongest amplitude) is a larger fraction there.
DB_RANGE = 100.0


def _pair_angle_reference(v_diff_v: np.ndarray, vt_v: float, i_ee_a: float,
                          r_e_ohm: float) -> np.ndarray:
    """The pair solver as it was before the in-place rewrite: series start clipped to the
    bracket, then Newton steps until a step is below 1e-8 (see ``core.pair_angle``)."""
    v = np.asarray(v_diff_v, dtype=float)
    two_vt = 2.0 * vt_v
    b = i_ee_a * r_e_ohm
    a = two_vt + b
    beta = b / a
    w = v / a
    w2 = w * w
    u = w * (1.0 + w2 * (beta / 3.0 + w2 * (beta * beta / 3.0 - 2.0 * beta / 15.0)))
    low = np.minimum(w, v / two_vt)
    high = np.maximum(w, v / two_vt)
    u = np.clip(u, low, high)
    for _ in range(60):
        t = np.tanh(u)
        step = (two_vt * u + b * t - v) / (two_vt + b * (1.0 - t * t))
        u = np.clip(u - step, low, high)
        if not np.abs(step).max(initial=0.0) > 1e-8:
            break
    return u


def test_the_in_place_pair_solver_finds_the_reference_root() -> None:
    rng = np.random.default_rng(14)
    for _ in range(40):
        vt = thermal_voltage_v(float(rng.uniform(-40.0, 125.0)))
        i_ee = float(rng.uniform(0.5e-3, 20e-3))
        r_e = float(rng.choice([0.0, rng.uniform(1.0, 60.0)]))
        v = rng.normal(0.0, float(rng.uniform(1e-3, 1.0)), size=(7, 9))
        fast = pair_angle(v, vt, i_ee, r_e)
        reference = _pair_angle_reference(v, vt, i_ee, r_e) if r_e else v / (2.0 * vt)
        np.testing.assert_allclose(fast, reference, rtol=1e-13, atol=1e-16)
        assert float(pair_angle(float(v[0, 0]), vt, i_ee, r_e)) == pytest.approx(
            float(fast[0, 0]), rel=1e-15, abs=1e-18)
    assert v.shape == (7, 9)  # the input is not written over


def _rf_grid_values_reference(amps: list[list[float]], shape: tuple[int, ...],
                              cell: CellState) -> np.ndarray:
    """X on the whole phase grid, every point solved (as before the mirror-image rewrite)."""
    total: np.ndarray | float = cell.v_os_rf_v
    for axis, (a, n) in enumerate(zip(amps, shape, strict=True)):
        view = [1] * len(shape)
        view[axis] = n
        total = total + _axis_wave(a, n).reshape(view)
    return np.tanh(_pair_angle_reference(np.asarray(total, dtype=float), cell.vt_v,
                                         cell.i_ee_a, cell.r_e_ohm))


@pytest.mark.parametrize("tones", [1, 2, 3])
def test_the_mirrored_rf_grid_equals_the_grid_solved_at_every_point(tones: int) -> None:
    rng = np.random.default_rng(100 + tones)
    for _ in range(6):
        cell = CellState(thermal_voltage_v(float(rng.uniform(-40.0, 85.0))),
                         float(rng.uniform(1e-3, 10e-3)), float(rng.uniform(1.0, 40.0)),
                         0.0, 0.0, float(rng.uniform(-3e-3, 3e-3)))
        amps = [[float(10 ** rng.uniform(-3.0, -0.5))] * int(rng.integers(1, 4))
                for _ in range(tones)]
        shape = tuple(int(rng.integers(7, 41)) for _ in range(tones))  # odd and even sizes
        fast = _rf_grid_values(amps, shape, cell)
        reference = _rf_grid_values_reference(amps, shape, cell)
        assert fast.shape == reference.shape == shape
        np.testing.assert_allclose(fast, reference, rtol=0, atol=1e-14)


@pytest.mark.parametrize("shape", [(7,), (8,), (1,), (2,), (30, 30), (9, 40), (3, 8, 5),
                                   (6, 6, 6)])
def test_the_mirror_made_by_slices_is_the_mirror_index_exactly(shape: tuple[int, ...]) -> None:
    """Grid point j of an axis holds the value solved at min(j, n − j); the slice copies
    give bit for bit the array that indexing with those indices gives (the definition)."""
    rng = np.random.default_rng(sum(shape))
    half = rng.standard_normal((4, *(n // 2 + 1 for n in shape)))
    index = np.ix_(*(np.minimum(np.arange(n), n - np.arange(n)) for n in shape))
    np.testing.assert_array_equal(_mirrored(half, shape), half[(slice(None), *index)])


@pytest.mark.parametrize("seed", range(6))
def test_a_guessed_lo_grid_gives_the_doubling_s_grid_and_coefficients(seed: int) -> None:
    rng = np.random.default_rng(seed)
    vt = thermal_voltage_v(float(rng.uniform(-40.0, 85.0)))
    cell = CellState(vt, float(rng.uniform(1e-3, 10e-3)), 0.0,
                     float(rng.uniform(-2e-3, 2e-3)), float(rng.uniform(-2e-3, 2e-3)))
    amps = [float(10 ** rng.uniform(-2.0, 0.2))]
    amps += [amps[0] * float(10 ** rng.uniform(-3.0, -1.0)) for _ in range(int(seed % 3))]
    plain = lo_factor(amps, cell, 9)
    for guess in (plain.grid_n, 2 * plain.grid_n, 4 * plain.grid_n, max(plain.grid_n // 2, 1),
                  32, 96, 1 << 16):
        guessed = lo_factor(amps, cell, 9, grid_guess=guess)
        assert guessed.grid_n == plain.grid_n, guess
        assert guessed.converged == plain.converged
        np.testing.assert_array_equal(guessed.orders, plain.orders)
        scale = float(np.max(np.abs(plain.s)))
        np.testing.assert_allclose(guessed.s, plain.s, rtol=0, atol=1e-14 * scale)
        np.testing.assert_allclose(guessed.d, plain.d, rtol=0, atol=1e-14 * scale)


def test_a_folded_spectrum_is_the_transform_of_every_other_sample() -> None:
    """The guessed LO grid checks its half grids from the guess's own spectrum (aliasing
    folds order k + n/2 onto k); the reference is scipy's transform of the subsampled
    signal (numpy/scipy FFT: rfft(x[::2]) / (n/2))."""
    import scipy.fft

    rng = np.random.default_rng(7)
    for n in (8, 32, 96, 1024):
        x = rng.normal(size=n) + np.cos(2 * np.pi * 3 * np.arange(n) / n)
        spectrum = scipy.fft.rfft(x) / n
        folded = _fold_half(spectrum, n)
        direct = scipy.fft.rfft(x[::2]) / (n // 2)
        assert folded.shape == direct.shape
        np.testing.assert_allclose(folded, direct, rtol=0, atol=1e-15 * np.abs(x).max())
        if n % 8 == 0:  # folding twice: every fourth sample
            np.testing.assert_allclose(_fold_half(folded, n // 2),
                                       scipy.fft.rfft(x[::4]) / (n // 4), rtol=0,
                                       atol=1e-15 * np.abs(x).max())


def _lines(products: tuple) -> dict[tuple[int, ...], tuple[float, float]]:
    return {p.orders: (p.freq_hz, p.power_dbm) for p in products}


def _assert_same_lines(fast: tuple, reference: tuple, where: str) -> None:
    got, want = _lines(fast), _lines(reference)
    assert len(fast) == len(reference), where
    assert got.keys() == want.keys(), where
    if not want:
        return
    keys = list(want)
    f_ref, p_ref = np.array([want[k] for k in keys]).T
    f_fast, p_fast = np.array([got[k] for k in keys]).T
    bad = np.abs(f_fast - f_ref) > FREQ_TOL_HZ + 1e-15 * np.abs(f_ref)
    assert not bad.any(), (where, [keys[i] for i in np.flatnonzero(bad)])
    top = float(p_ref.max())
    strong = p_ref > top - DB_RANGE
    bad = strong & (np.abs(p_fast - p_ref) > TOL_DB)
    assert not bad.any(), (where, [(keys[i], p_fast[i] - p_ref[i]) for i in np.flatnonzero(bad)])
    # weaker lines: amplitude error below 1e-12 of the strongest line's amplitude
    delta = np.abs(10 ** (p_fast / 20.0) - 10 ** (p_ref / 20.0))
    bad = ~strong & (delta > 1e-12 * 10 ** (top / 20.0))
    assert not bad.any(), (where, [keys[i] for i in np.flatnonzero(bad)])


@pytest.mark.parametrize("part_name", ["kx-2417", "kx-5860u"])
def test_a_part_warm_from_a_sweep_gives_each_point_s_lines_as_a_fresh_part(
    part_name: str,
) -> None:
    """A two-tone power and frequency sweep with source harmonics, the LO stepping with the
    input as on a gain-versus-frequency study: every response of the warm part equals a
    fresh part's (no caches) for that point alone."""
    part = load_part(part_name)
    rng = np.random.default_rng(2417)
    op = OperatingPoint(temperature_c=float(rng.uniform(-40.0, 85.0)), supply_v=3.3)
    harmonics = (-35.0, -45.0)
    f_in = 2.2e9 if part.conversion == "down" else 150e6
    for i in range(8):
        lo = ToneInput(2.1e9 + i * 3e6 if part.conversion == "down" else 2.4e9 + i * 3e6,
                       float(rng.uniform(-6.0, 3.0)), 0.0, harmonics)
        power = float(rng.uniform(-40.0, -15.0))
        f1 = f_in + float(rng.uniform(-20e6, 20e6))
        tones = [ToneInput(f1, power, float(rng.uniform(-3, 3)), harmonics),
                 ToneInput(f1 + 1e6, power, 0.0, harmonics)]
        warm = part.evaluate(op, lo, tones)
        fresh = part.with_changes().evaluate(op, lo, tones)
        where = f"{part_name} point {i}"
        _assert_same_lines(warm.if_port, fresh.if_port, where + " output")
        _assert_same_lines(warm.rf_port, fresh.rf_port, where + " input")
        _assert_same_lines(warm.lo_port, fresh.lo_port, where + " lo")
        assert warm.if_noise_dbm_per_hz == pytest.approx(fresh.if_noise_dbm_per_hz, abs=1e-12)
        assert warm.notes == pytest.approx(fresh.notes, rel=1e-13)


def test_a_response_read_as_arrays_holds_the_lines_its_products_hold() -> None:
    """The simulated bench reads a response's ports as arrays (the products are made only
    for a reader that asks for them): the same lines either way, and a response built from
    the products equals the one built from the arrays."""
    from sweeprig.sim.mixer import MixerResponse

    part = load_part("kx-2417")
    h = (-35.0, -45.0)
    resp = part.evaluate(OperatingPoint(), ToneInput(2.1e9, 0.0, 0.0, h),
                         [ToneInput(2.2e9, -20.0, 0.0, h), ToneInput(2.201e9, -20.0, 0.0, h)])
    for port in ("if_port", "rf_port", "lo_port"):
        levels, products = resp.levels(port), getattr(resp, port)
        assert len(products) == levels.freq_hz.size > 0
        assert [p.freq_hz for p in products] == levels.freq_hz.tolist()
        assert [p.power_dbm for p in products] == levels.power_dbm.tolist()
        assert [p.orders for p in products] == levels.orders.tolist()
        assert getattr(resp, port) is products  # made once
    again = MixerResponse(resp.if_port, resp.rf_port, resp.lo_port, resp.if_noise_dbm_per_hz,
                          resp.supply_current_a, resp.notes)
    assert again == resp
    assert copy.deepcopy(resp) == resp and pickle.loads(pickle.dumps(resp)) == resp
    with pytest.raises(AttributeError):
        resp.supply_current_a = 1.0  # type: ignore[misc]


def test_a_sweep_response_reads_as_the_lines_its_products_hold_and_keeps_them() -> None:
    """The sweep path hands each point's lines over as slices of arrays the points share,
    with the orders as codes (made on first reading): read as arrays or as products, copied
    or pickled, the same lines; neither the response nor its arrays' holder can be set."""
    part = load_part("kx-2417")
    h = (-35.0, -45.0)
    lo = ToneInput(2.1e9, 0.0, 0.0, h)
    sets = [[ToneInput(2.2e9, p, 0.0, h), ToneInput(2.201e9, p, 0.0, h)]
            for p in (-30.0, -25.0, -20.0)]
    for resp in part.evaluate_many(OperatingPoint(), lo, sets):
        copied, pickled = copy.deepcopy(resp), pickle.loads(pickle.dumps(resp))  # unread
        for port in ("if_port", "rf_port", "lo_port"):
            levels = resp.levels(port)
            assert resp.levels(port) is levels  # made once
            products = getattr(resp, port)
            assert len(products) == levels.freq_hz.size > 0
            assert [p.freq_hz for p in products] == levels.freq_hz.tolist()
            assert [p.power_dbm for p in products] == levels.power_dbm.tolist()
            assert [p.orders for p in products] == levels.orders.tolist()
            with pytest.raises(AttributeError):
                levels.freq_hz = levels.freq_hz  # type: ignore[misc]
        assert copied == resp == pickled
        with pytest.raises(AttributeError):
            resp.notes = {}  # type: ignore[misc]


@pytest.mark.parametrize("part_name", ["kx-2417", "kx-5803"])
def test_a_sweep_evaluated_together_gives_each_point_s_lines_alone(part_name: str) -> None:
    """evaluate_many over a two-tone power sweep at a few frequencies (the points share
    grid sizes, so their transconductor factors are solved together), a single tone and no
    tone at all in the same sweep: each response equals evaluate() for that point alone."""
    part = load_part(part_name)
    op = OperatingPoint()
    harmonics = (-35.0, -45.0)
    lo = ToneInput(2.1e9, 0.0 if part_name == "kx-2417" else 13.0, 0.0, harmonics)
    sweep: list[list[ToneInput]] = []
    for i in range(8):
        power = -35.0 + 1.25 * i
        f1 = 2.2e9 + (i % 3) * 1e6
        sweep.append([ToneInput(f1, power, 0.3 * i, harmonics),
                      ToneInput(f1 + 1e6, power, 0.0, harmonics)])
    sweep += [[ToneInput(2.25e9, -20.0, 0.0, harmonics)], []]
    together = part.evaluate_many(op, lo, sweep)
    assert len(together) == len(sweep)
    fresh = part.with_changes()  # its own caches: each point evaluated on its own
    for i, (tones, response) in enumerate(zip(sweep, together, strict=True)):
        alone = fresh.evaluate(op, lo, tones)
        where = f"{part_name} point {i}"
        _assert_same_lines(response.if_port, alone.if_port, where + " output")
        _assert_same_lines(response.rf_port, alone.rf_port, where + " input")
        assert response.notes == pytest.approx(alone.notes, rel=1e-13)


def _random_part(rng: np.random.Generator, name: str):  # type: ignore[no-untyped-def]
    """A shipped part with its offsets, common-mode path, isolations, slopes, corners,
    match and leakage phases drawn at random (ranges around the shipped parts')."""
    from sweeprig.sim.mixer import PortNetwork
    from sweeprig.sim.mixer.realism import seeded_leakage_phases

    part = load_part(name)

    def maybe(value: float) -> float | None:
        return None if rng.random() < 0.25 else value

    out = part.output_port
    changes = {
        "quad_offset_1_v": float(rng.uniform(-3e-3, 3e-3)),
        "quad_offset_2_v": float(rng.uniform(-3e-3, 3e-3)),
        "rf_pair_offset_v": float(rng.uniform(-4e-3, 4e-3)),
        "cm_second_order": float(rng.choice([0.0, rng.uniform(0.1, 1.0)])),
        "load_mismatch": float(rng.uniform(0.0, 0.01)),
        "isolation_rf_if_db": maybe(float(rng.uniform(20.0, 60.0))),
        "isolation_lo_if_db": maybe(float(rng.uniform(20.0, 60.0))),
        "isolation_lo_rf_db": maybe(float(rng.uniform(20.0, 60.0))),
        "isolation_rf_lo_db": maybe(float(rng.uniform(20.0, 60.0))),
        "isolation_rf_if_slope_db_per_octave": float(rng.uniform(-6.0, 0.0)),
        "isolation_lo_if_slope_db_per_octave": float(rng.uniform(-6.0, 0.0)),
        "leakage_phases": seeded_leakage_phases(int(rng.integers(1 << 30)), 2e-9),
    }
    corners = rng.integers(0, 3)  # both corners, the low-pass only, flat
    port = PortNetwork(out.resistance_ohm, maybe(float(rng.uniform(10.0, 25.0))),
                       out.highpass_hz if corners == 0 else None,
                       out.lowpass_hz if corners < 2 else None)
    changes["if_port" if part.conversion == "down" else "rf_port"] = port
    return part.with_changes(**changes)


@pytest.mark.parametrize("seed", range(4))
def test_the_vectorised_sweep_path_gives_each_random_point_s_lines_alone(seed: int) -> None:
    """evaluate_many (one vectorised chain over the points) against evaluate() (the
    reference, one point at a time) at 1e-9 dB: random parts and operating points, random
    points of one to three tones with random powers, frequencies and phases, source
    harmonics on and off, points sharing their frequencies (a power sweep) and not, in one
    shuffled call; and an LO that follows the input (one call per LO)."""
    rng = np.random.default_rng(1400 + seed)
    name = ["kx-2417", "kx-5803", "kx-5860u", "ideal"][seed]
    part = _random_part(rng, name)
    reference = part.with_changes()  # its own caches
    op = OperatingPoint(temperature_c=float(rng.uniform(-40.0, 85.0)),
                        supply_v=float(rng.uniform(3.0, 3.6)))
    down = part.conversion == "down"
    f_in, f_lo = (2.2e9, 2.1e9) if down else (150e6, 2.4e9)
    lo_h = tuple(float(v) for v in rng.uniform(-50.0, -25.0, size=int(rng.integers(0, 3))))
    lo = ToneInput(f_lo, float(rng.uniform(-3.0, 10.0)), float(rng.uniform(-3, 3)), lo_h)
    sweep: list[list[ToneInput]] = []
    on = (-35.0, -45.0)
    # (tones, source harmonics): three tones without harmonics keep the reference quick
    for n_tones, harmonics in ((1, on), (2, on), (3, ()), (2, ()), (1, ()), (2, on)):
        freqs = [f_in + float(rng.uniform(-20e6, 20e6)) + k * 1e6 for k in range(n_tones)]
        for _ in range(4):  # a short power sweep at these frequencies
            power = float(rng.uniform(-45.0, -5.0))
            phase = float(rng.choice([0.0, rng.uniform(-3, 3)]))
            sweep.append([ToneInput(f, power, phase if k == 0 else 0.0, harmonics)
                          for k, f in enumerate(freqs)])
        sweep.append([ToneInput(f + float(rng.uniform(-5e6, 5e6)), float(
            rng.uniform(-45.0, -5.0)), 0.0, harmonics) for f in freqs])  # a point of its own
    sweep.append([])
    order = rng.permutation(len(sweep))
    sweep = [sweep[i] for i in order]
    together = part.evaluate_many(op, lo, sweep)
    for i, (tones, response) in enumerate(zip(sweep, together, strict=True)):
        alone = reference.evaluate(op, lo, tones)
        where = f"{name} seed {seed} point {i} ({len(tones)} tones)"
        _assert_same_lines(response.if_port, alone.if_port, where + " output")
        _assert_same_lines(response.rf_port, alone.rf_port, where + " input")
        _assert_same_lines(response.lo_port, alone.lo_port, where + " lo")
        assert response.if_noise_dbm_per_hz == pytest.approx(alone.if_noise_dbm_per_hz,
                                                              abs=1e-12)
        assert response.supply_current_a == alone.supply_current_a
        assert response.notes == pytest.approx(alone.notes, rel=1e-13)
    for step in range(4):  # the LO following the input: a new LO every point
        tones = [ToneInput(f_in + step * 7e6, -20.0, 0.0, (-35.0, -45.0)),
                 ToneInput(f_in + step * 7e6 + 1e6, -20.0, 0.0, (-35.0, -45.0))]
        moved = ToneInput(f_lo + step * 7e6, lo.power_dbm, 0.0, lo_h)
        (response,) = part.evaluate_many(op, moved, [tones])
        alone = reference.evaluate(op, moved, tones)
        _assert_same_lines(response.if_port, alone.if_port, f"{name} LO step {step}")


def test_the_sweep_path_takes_a_part_whose_bias_is_off_and_a_bad_tone_as_evaluate() -> None:
    """Below the part's minimum supply (no tail current) every point goes the one-point
    way; a bad tone is refused naming it, before anything is computed."""
    from sweeprig.errors import InputError

    part = load_part("kx-2417")
    lo = ToneInput(2.1e9, 0.0)
    tones = [ToneInput(2.2e9, -20.0), ToneInput(2.201e9, -20.0)]
    off = OperatingPoint(supply_v=2.0)
    (response,) = part.evaluate_many(off, lo, [tones])
    _assert_same_lines(response.if_port, part.with_changes().evaluate(off, lo, tones).if_port,
                       "bias off")
    with pytest.raises(InputError, match="input tone 2"):
        part.evaluate_many(OperatingPoint(), lo, [tones, [tones[0], ToneInput(2.2e9,
                                                                               math.nan)]])


# --- the one-point path against the chain it replaced -------------------------------------
_PORTS = ("if_port", "rf_port", "lo_port")


def _one_point_plan(part_name: str, rng: np.random.Generator) -> list[tuple[object, ...]]:
    """About a hundred points as the benches and studies ask them: power sweeps at a fixed
    LO and tone frequencies (the kept tables serve all but the first point), the LO
    following the tones (a new LO every point), one to three tones or none, source
    harmonics on and off, phases, other operating points, no LO, a bias switched off."""
    down = load_part(part_name).conversion == "down"
    lo_dbm = {"kx-2417": 0.0, "kx-5803": 13.0, "ideal": 0.0}.get(part_name, 10.0)
    f_in = 2.2e9 if down else 120e6
    plan: list[tuple[object, ...]] = []
    for group in range(14):
        harmonics = ((), (-35.0, -45.0), (float(rng.uniform(-60.0, -25.0)),))[group % 3]
        n_tones = (2, 1, 3, 2, 0)[group % 5]
        follow = group % 4 == 1
        op = OperatingPoint() if group % 6 else OperatingPoint(
            float(rng.uniform(-40.0, 85.0)), float(rng.uniform(2.8, 3.6)))
        if group == 9:
            op = OperatingPoint(25.0, 1.0)  # below every part's minimum supply: bias off
        f1 = f_in * float(rng.uniform(0.85, 1.2))
        spacing = float(rng.choice([2e5, 1e6, 20e6]))
        phase = float(rng.uniform(0.0, 6.0)) if group % 7 == 3 else 0.0
        start = float(rng.uniform(-45.0, -20.0))
        for step in range(7):
            f = f1 + step * 3e5 if follow else f1
            if down:
                lo_freq = f - 70e6 if follow else 2.1e9
            else:
                lo_freq = 2.4e9 + step * 3e5 if follow else 2.4e9
            lo = None if group == 11 else ToneInput(
                lo_freq, lo_dbm + (float(rng.uniform(-6.0, 3.0)) if group % 5 == 2 else 0.0),
                phase, harmonics if group % 2 else ())
            power = start + 0.5 * step
            tones = [ToneInput(f + k * spacing, power + 0.25 * k, phase * k, harmonics)
                     for k in range(n_tones)]
            plan.append((op, lo, tones))
    return plan


def _assert_identical(fast: object, reference: object, where: str) -> None:
    """Every port's frequencies, levels and orders equal bit for bit, as arrays and as
    :class:`Product` tuples, and the noise, supply current and notes."""
    for port in _PORTS:
        got, want = fast.levels(port), reference.levels(port)  # type: ignore[attr-defined]
        assert np.array_equal(got.freq_hz, want.freq_hz), (where, port)
        assert np.array_equal(got.power_dbm, want.power_dbm), (where, port)
        assert got.orders.tolist() == want.orders.tolist(), (where, port)
        assert getattr(fast, port) == getattr(reference, port), (where, port)
    assert fast.if_noise_dbm_per_hz == reference.if_noise_dbm_per_hz, where  # type: ignore[attr-defined]
    assert fast.supply_current_a == reference.supply_current_a, where  # type: ignore[attr-defined]
    assert fast.notes == reference.notes, where  # type: ignore[attr-defined]


@pytest.mark.parametrize("part_name", ["kx-2417", "kx-5803", "ideal", "kx-5860u"])
def test_the_one_point_path_gives_the_replaced_chain_s_lines_bit_for_bit(
    part_name: str,
) -> None:
    """Issue 14's one-call speed-ups (kept line tables and common-mode layouts, the orders
    carried as codes, the input and LO ports made when read) change nothing: each response
    equals, bit for bit, the one the chain they replaced makes
    (``tests/sim/mixer_reference_chain.py``) from the same factors; a point evaluated again
    (its tables kept) too."""
    part = load_part(part_name)
    rng = np.random.default_rng(1405)
    for i, (op, lo, tones) in enumerate(_one_point_plan(part_name, rng)):
        fast = part.evaluate(op, lo, tones)  # type: ignore[arg-type]
        reference = reference_response(part, op, lo, tones)  # type: ignore[arg-type]
        _assert_identical(fast, reference, f"{part_name} point {i}")
        if i % 5 == 0:
            _assert_identical(part.evaluate(op, lo, tones), reference,  # type: ignore[arg-type]
                              f"{part_name} point {i} again")


def _lo_factor_from_spectra_reference(n: int, d_k: np.ndarray, s_k: np.ndarray,
                                      max_order: int, converged: bool) -> LoFactor:
    """The LO coefficients' table as it was made before issue 14 (fancy indexing, always
    pruned through a mask)."""
    m_pos = np.arange(max_order + 1)
    orders = np.concatenate([-m_pos[:0:-1], m_pos])
    d = np.concatenate([np.conj(d_k[m_pos[:0:-1]]), d_k[m_pos]])
    s = np.concatenate([np.conj(s_k[m_pos[:0:-1]]), s_k[m_pos]])
    mag = np.maximum(np.abs(d), np.abs(s))
    keep = mag > 1e-13 * float(mag.max())
    return LoFactor(orders=orders[keep], d=d[keep], s=s[keep], grid_n=n, converged=converged)


@pytest.mark.parametrize("seed", range(4))
def test_the_lo_coefficient_table_is_the_reference_s_bit_for_bit(seed: int) -> None:
    rng = np.random.default_rng(seed)
    for _ in range(30):
        n = int(rng.choice([32, 64, 256, 1024]))
        max_order = int(rng.integers(1, n // 2 - 1))
        d_k, s_k = (rng.normal(size=n // 2 + 1) + 1j * rng.normal(size=n // 2 + 1)
                    for _ in range(2))
        if rng.random() < 0.5:  # some coefficients at rounding level: pruned
            d_k[rng.integers(0, n // 2 + 1, size=3)] = 0.0
            s_k[rng.integers(0, n // 2 + 1, size=3)] = 1e-20
            d_k[d_k.size // 3] = s_k[d_k.size // 3] = 0.0
        fast = _lo_factor_from_spectra(n, d_k, s_k, max_order, True)
        reference = _lo_factor_from_spectra_reference(n, d_k, s_k, max_order, True)
        for name in ("orders", "d", "s", "abs_s", "abs_d"):
            assert np.array_equal(getattr(fast, name), getattr(reference, name)), name
        assert (fast.max_s, fast.max_d, fast.has_d, fast.grid_n) == (
            reference.max_s, reference.max_d, reference.has_d, reference.grid_n)
