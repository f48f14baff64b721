"""Benchmark: three-tone evaluations (LO + two RF tones) per second on one core.

Each case runs a sweep of distinct evaluations (power and frequency change every call, as on
a bench, so only the LO spectrum and the grid sizes come from the caches) several times and
prints the median of three runs (each the best of its passes), in CPU time of this process
(other load on the machine distorts less).

Three ways are timed: one call per point read as the simulated bench reads it (the output
port's lines as arrays, :meth:`MixerResponse.levels`); one call per point read as a tuple of
:class:`Product` (what the truth and reference-figure code iterate; the tuples are made on
first reading); and the points handed over as sweeps of 40 (:meth:`MixerPart.evaluate_many`:
one vectorised chain over the points, :mod:`sweeprig.sim.mixer.sweep`; what the simulated
bench's read-ahead uses for a sweep it recognises). Issue 14 sets ≥ 5,000 evaluations/s on
the demo part (kx-2417) with source harmonics on, measured on a quiet machine; the lines say
met or MISSED against it for one call per point and for the sweep path, with the load
average beside them. Two benchmarks split the time per evaluation by stage (where the next
speed-up has to come from): the sweep path's, and the one-call path's for a power sweep at a
fixed LO and for the LO following the tones.
"""

import os
import statistics
import time
from collections.abc import Callable
from typing import Any

import pytest

from sweeprig.sim.mixer import OperatingPoint, ToneInput, load_part

_PASSES = 3
_RUNS = 3  # the median of three runs is printed
_CALLS = 600
#: Points handed to MixerPart.evaluate_many at once (a 10 dB power sweep in 0.25 dB steps).
_SWEEP_POINTS = 40
#: Issue 14: three-tone evaluations per second on one core, demo part, source harmonics on.
TARGET_PER_S = 5_000.0


def _sweep_rate(part_name: str, lo_dbm: float, tone_dbm: float,
                harmonics: tuple[float, ...], read: str) -> tuple[float, float]:
    """(evaluations per second: the median of three runs, each its best pass; output lines
    per response)."""
    rates, lines = [], 0.0
    for _ in range(_RUNS):
        rate, lines = _one_run(part_name, lo_dbm, tone_dbm, harmonics, read)
        rates.append(rate)
    return statistics.median(rates), lines


def _one_run(part_name: str, lo_dbm: float, tone_dbm: float,
             harmonics: tuple[float, ...], read: str) -> tuple[float, float]:
    part = load_part(part_name)
    op = OperatingPoint()
    lo = ToneInput(2.1e9, lo_dbm, 0.0, harmonics)
    plan = []
    for i in range(_CALLS):
        power = tone_dbm + (i % 40) * 0.25  # a 10 dB power sweep …
        f1 = 2.2e9 + (i % 7) * 1e6  # … at a few frequencies
        plan.append([ToneInput(f1, power, 0.0, harmonics),
                     ToneInput(f1 + 1e6, power, 0.0, harmonics)])
    for tones in plan[:50]:  # warm the LO spectrum and grid-size caches, as a sweep would
        part.evaluate(op, lo, tones)
    best = float("inf")
    lines = 0
    for _ in range(_PASSES):
        lines = 0
        start = time.process_time()
        if read == "sweep":
            for at in range(0, _CALLS, _SWEEP_POINTS):
                for response in part.evaluate_many(op, lo, plan[at : at + _SWEEP_POINTS]):
                    lines += response.levels("if_port").freq_hz.size
        elif read == "arrays":
            for tones in plan:
                lines += part.evaluate(op, lo, tones).levels("if_port").freq_hz.size
        else:
            for tones in plan:
                lines += len(part.evaluate(op, lo, tones).if_port)
        best = min(best, time.process_time() - start)
    return _CALLS / best, lines / _CALLS


def _verdict(rate: float) -> str:
    return (f"target {TARGET_PER_S:,.0f}/s: {'met' if rate >= TARGET_PER_S else 'MISSED'} "
            f"({rate / TARGET_PER_S:.2f}× the target)")


@pytest.mark.perf
def test_three_tone_evaluation_rate_with_the_lo_following_the_input() -> None:
    """A gain-versus-frequency sweep: the LO steps with the two tones (a fixed IF), so its
    factor is new at every point (its drive at the quad moves with the port's band edges);
    the large simulated run's case (one tone there). Demo part, harmonics on."""
    part = load_part("kx-2417")
    op = OperatingPoint()
    harmonics = (-35.0, -45.0)
    plan = []
    for i in range(_CALLS):
        f1 = 2.3e9 + i * 2e5
        plan.append((ToneInput(f1 - 70e6, 7.0, 0.0, harmonics),
                     [ToneInput(f1, -25.0, 0.0, harmonics),
                      ToneInput(f1 + 1e6, -25.0, 0.0, harmonics)]))
    for lo, tones in plan[:50]:
        part.evaluate(op, lo, tones)
    rates = []
    for _ in range(_RUNS):
        best = float("inf")
        for _ in range(_PASSES):
            start = time.process_time()
            for lo, tones in plan:
                part.evaluate(op, lo, tones).levels("if_port")
            best = min(best, time.process_time() - start)
        rates.append(_CALLS / best)
    rate = statistics.median(rates)
    print(f"\nkx-2417, sources with 2nd/3rd harmonics, LO 70 MHz below the first tone and "
          f"following it: {rate:,.0f} three-tone evaluations/s on one core, one call per "
          f"point (a new LO every point: no sweep path); {_verdict(rate)}; load average "
          f"{os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")


@pytest.mark.perf
@pytest.mark.parametrize(
    ("part_name", "lo_dbm", "tone_dbm", "harmonics"),
    [
        ("kx-2417", 0.0, -35.0, ()),
        ("kx-5803", 13.0, -20.0, ()),
        ("ideal", 0.0, -50.0, ()),
        ("kx-2417", 0.0, -35.0, (-35.0, -45.0)),
    ],
)
def test_three_tone_evaluation_rate(
    part_name: str, lo_dbm: float, tone_dbm: float, harmonics: tuple[float, ...]
) -> None:
    label = "sources with 2nd/3rd harmonics" if harmonics else "clean sources"
    print(f"\n{part_name}, {label}, two tones {tone_dbm:+.0f} to {tone_dbm + 10:+.0f} dBm each "
          f"(load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores):")
    for read, how in (("arrays", "one call per point, read as arrays (the simulated bench)"),
                      ("products", "one call per point, read as Product tuples"),
                      ("sweep", f"{_SWEEP_POINTS} points per call (evaluate_many), read as "
                                "arrays")):
        rate, lines = _sweep_rate(part_name, lo_dbm, tone_dbm, harmonics, read)
        verdict = f"; {_verdict(rate)}" if part_name == "kx-2417" and harmonics else ""
        print(f"  {rate:,.0f} three-tone evaluations/s on one core (median of {_RUNS}), "
              f"{how}, {lines:.0f} output lines per response{verdict}; load average "
              f"{os.getloadavg()[0]:.1f}")


#: The sweep path's stages, by the function of :mod:`sweeprig.sim.mixer.sweep` that does
#: each (the outermost one counts when they nest).
_STAGES = {
    "rf_factor_rows": "transconductor factor: pair solved on the half grid, mirrored, FFT",
    "_combine": "combination: line tables, bounds, amplitudes",
    "merge_sorted": "merge of coincident lines",
    "merge_segments": "merge of coincident lines",
    "_leak_lines": "linear leakage paths (input/output, reflections, LO)",
    "_common_mode": "common-mode IM2 lines",
    "add_segments": "adding the IM2 lines",
    "add_entry_segments": "adding the leakage lines",
    "_levels": "floor, dBm and each point's arrays",
    "_tone_amplitudes": "input amplitudes at the core and their buckets",
    "_bucket_rows": "input amplitudes at the core and their buckets",
}


def _stage_timer(spent: dict[str, float]) -> Callable[[Callable[..., Any], str],
                                                    Callable[..., Any]]:
    """A wrapper maker: ``timed(fn, label)`` adds the processor time of each outermost call
    of ``fn`` to ``spent[label]`` (s); a call nested inside another timed one counts only
    for the outer one."""
    depth = [0]

    def timed(fn: Callable[..., Any], label: str) -> Callable[..., Any]:
        def run(*args: Any, **kwargs: Any) -> Any:
            if depth[0]:
                return fn(*args, **kwargs)
            depth[0] += 1
            start = time.process_time()
            try:
                return fn(*args, **kwargs)
            finally:
                spent[label] = spent.get(label, 0.0) + time.process_time() - start
                depth[0] -= 1
        return run

    return timed


@pytest.mark.perf
def test_where_a_sweep_evaluation_s_time_goes(monkeypatch: pytest.MonkeyPatch) -> None:
    """The sweep path (40 points a call, the demo part, harmonics on) split by stage: the
    processor time of each stage per evaluation, the best of several passes, so that the
    next speed-up starts from a measurement."""
    from sweeprig.sim.mixer import sweep

    spent: dict[str, float] = {}
    timed = _stage_timer(spent)

    for name, label in _STAGES.items():
        monkeypatch.setattr(sweep, name, timed(getattr(sweep, name), label))
    part = load_part("kx-2417")
    op = OperatingPoint()
    harmonics = (-35.0, -45.0)
    lo = ToneInput(2.1e9, 0.0, 0.0, harmonics)
    plan = []
    for i in range(_CALLS):
        power = -35.0 + (i % 40) * 0.25
        f1 = 2.2e9 + (i % 7) * 1e6
        plan.append([ToneInput(f1, power, 0.0, harmonics),
                     ToneInput(f1 + 1e6, power, 0.0, harmonics)])
    for tones in plan[:50]:
        part.evaluate(op, lo, tones)
    best_total, best = float("inf"), {}
    for _ in range(2 * _PASSES):
        spent.clear()
        start = time.process_time()
        for at in range(0, _CALLS, _SWEEP_POINTS):
            for response in part.evaluate_many(op, lo, plan[at : at + _SWEEP_POINTS]):
                response.levels("if_port")
        total = time.process_time() - start
        if total < best_total:
            best_total, best = total, dict(spent)
    print(f"\nkx-2417, sources with 2nd/3rd harmonics, {_SWEEP_POINTS} points per call: "
          f"processor time per evaluation by stage (best of {2 * _PASSES} passes; load "
          f"average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores):")
    for label, seconds in sorted(best.items(), key=lambda item: -item[1]):
        print(f"  {seconds / _CALLS * 1e6:6.1f} us  {label}")
    rest = best_total - sum(best.values())
    print(f"  {rest / _CALLS * 1e6:6.1f} us  the rest (grouping, checks, caches, responses)")
    print(f"  {best_total / _CALLS * 1e6:6.1f} us per evaluation: "
          f"{_CALLS / best_total:,.0f} evaluations/s")
    assert best


#: The one-call path's stages (:meth:`MixerPart.evaluate`), by the function that does each
#: (the outermost one counts when they nest): (owner, name, label).
_ONE_CALL_STAGES = (
    ("part", "MixerPart._lo_prepared", "LO factor, gain and noise (cached per LO)"),
    ("part", "MixerPart.tone_core_amplitudes", "input amplitudes at the core"),
    ("part", "MixerPart._rf_shape", "RF grid size (cached per 1 dB bucket)"),
    ("part", "rf_factor", "transconductor factor: pair solved on the half grid, FFT"),
    ("part", "MixerPart._line_table", "line table (kept per LO and tone frequencies)"),
    ("part", "combine_on", "combination: bounds, amplitudes, codes"),
    ("part", "merge_coincident", "sort and merge of coincident lines"),
    ("part", "MixerPart._common_mode_layout", "common-mode layout (kept per frequencies)"),
    ("part", "common_mode_im2_amplitudes", "common-mode IM2 amplitudes"),
    ("part", "add_lines", "adding the IM2 lines"),
    ("part", "_tone_entries", "leakage lines to the output"),
    ("part", "_add_entries", "adding the leakage lines"),
    ("part", "MixerPart._levels", "floor and dBm"),
)


def _one_call_split(
    monkeypatch: pytest.MonkeyPatch, plan: list[tuple[ToneInput, list[ToneInput]]],
) -> tuple[dict[str, float], float]:
    """Processor time per stage of one call per point (best of several passes) and the
    total, both per evaluation, s. The timing wrappers add a little to each stage."""
    from sweeprig.sim.mixer import part as part_module

    spent: dict[str, float] = {}
    timed = _stage_timer(spent)

    for _, dotted, label in _ONE_CALL_STAGES:
        owner: Any = part_module
        *outer, name = dotted.split(".")
        for step in outer:
            owner = getattr(owner, step)
        fn = owner.__dict__[name] if isinstance(owner, type) else getattr(owner, name)
        if isinstance(fn, staticmethod):
            monkeypatch.setattr(owner, name, staticmethod(timed(fn.__func__, label)))
        else:
            monkeypatch.setattr(owner, name, timed(fn, label))
    part = load_part("kx-2417")
    op = OperatingPoint()
    for lo, tones in plan[:50]:
        part.evaluate(op, lo, tones)
    best_total, best = float("inf"), {}
    for _ in range(2 * _PASSES):
        spent.clear()
        start = time.process_time()
        for lo, tones in plan:
            part.evaluate(op, lo, tones).levels("if_port")
        total = time.process_time() - start
        if total < best_total:
            best_total, best = total, dict(spent)
    return ({label: seconds / len(plan) for label, seconds in best.items()},
            best_total / len(plan))


@pytest.mark.perf
def test_where_a_one_call_evaluation_s_time_goes(monkeypatch: pytest.MonkeyPatch) -> None:
    """The one-call path (the demo part, harmonics on) split by stage, for a power sweep at
    a fixed LO (the line tables and layouts kept) and for the LO following the tones (all
    made afresh, and a new LO factor every point): where the next speed-up has to come
    from."""
    harmonics = (-35.0, -45.0)
    fixed, following = [], []
    for i in range(_CALLS):
        power = -35.0 + (i % 40) * 0.25
        f1 = 2.2e9 + (i % 7) * 1e6
        fixed.append((ToneInput(2.1e9, 0.0, 0.0, harmonics),
                      [ToneInput(f1, power, 0.0, harmonics),
                       ToneInput(f1 + 1e6, power, 0.0, harmonics)]))
        f1 = 2.3e9 + i * 2e5
        following.append((ToneInput(f1 - 70e6, 7.0, 0.0, harmonics),
                          [ToneInput(f1, -25.0, 0.0, harmonics),
                           ToneInput(f1 + 1e6, -25.0, 0.0, harmonics)]))
    for title, plan in (("a power sweep at a fixed LO", fixed),
                        ("the LO following the tones", following)):
        stages, total = _one_call_split(monkeypatch, plan)
        print(f"\nkx-2417, sources with 2nd/3rd harmonics, one call per point, {title}: "
              f"processor time per evaluation by stage (best of {2 * _PASSES} passes; "
              f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores):")
        for label, seconds in sorted(stages.items(), key=lambda item: -item[1]):
            print(f"  {seconds * 1e6:6.1f} us  {label}")
        print(f"  {(total - sum(stages.values())) * 1e6:6.1f} us  the rest (checks, caches, "
              "records, the response)")
        print(f"  {total * 1e6:6.1f} us per evaluation (with the timing wrappers)")
        monkeypatch.undo()
        assert stages
