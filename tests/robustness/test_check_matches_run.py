"""``check`` refuses a plan if and only if the drivers would refuse one of its settings.

Random sequences and bench files — frequencies, levels, path losses, temperatures, supply
voltages, current limits, safe states, switch channels and analyzer settings, some inside and
some beyond each instrument's own range (its driver profile) or the bench file's limits — go
through the pre-flight check (what ``sweeprig check`` runs) and, separately and without it,
through the real engine: ``open_bench`` (drivers limited to the bench file), the ``Runner`` over
every point, then the safe state, against the simulated instruments behind in-process fake
transports. The limits that are not a driver's (the part's port ratings, the analyzer's
maximum input) are set out of reach, so that the two must agree exactly: the check refuses
when, and only when, a driver refuses a setting before sending it; and both name the same
origin of the limit.

The default suite runs a short version; ``-m soak`` runs the long one.
"""

from __future__ import annotations

import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from unittest import mock

import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

import sweeprig.engine.connect as connect
from sweeprig.clock import VirtualClock
from sweeprig.engine.connect import open_bench
from sweeprig.engine.runner import Runner
from sweeprig.engine.safe import make_safe
from sweeprig.errors import InputError, SafetyLimitError, SweeprigError
from sweeprig.formats.bench import load_bench
from sweeprig.formats.sequence import load_sequence, required_roles
from sweeprig.instruments import available_profiles
from sweeprig.plan.expand import iter_points
from sweeprig.plan.preflight import check_limits, safety_error
from sweeprig.sim.bench import build_sim_instruments
from sweeprig.transport.fake import FakeTransport

ROLES = ("rf", "rf2", "lo", "sa", "pm", "dc", "chamber", "switch")
FAKE = {role: f"TCPIP0::fake-{role}::5025::SOCKET" for role in ROLES}
PROFILES = {"rf": "scpi-source", "rf2": "scpi-source", "lo": "scpi-source",
            "sa": "scpi-analyzer", "pm": "scpi-powermeter", "dc": "scpi-supply",
            "chamber": "thermal-chamber", "switch": "scpi-switch"}


@dataclass(frozen=True)
class Files:
    sequence: str
    bench: str
    focus: str = "none"


def _q(value: float, unit: str) -> str:
    return f'"{value:g} {unit}"'


def _r(low: float, high: float, digits: int = 1) -> st.SearchStrategy[float]:
    return st.floats(low, high).map(lambda x: round(x, digits))


FOCUS = ("none", "rf_frequency", "lo_frequency", "level_profile", "level_low", "level_bench",
         "temperature", "supply", "current", "safe_supply", "safe_chamber", "switch",
         "averages", "rbw", "centre", "ref_level")
"""The one setting each example puts near a limit (the rest stays well inside every range)."""


@st.composite
def files(draw: st.DrawFn) -> Files:
    """A bench file and a sequence with one setting drawn across a limit: the shipped
    profiles' ranges (source 9 kHz..6 GHz, -130..20 dBm; supply 0..30 V, 0..3 A; chamber
    -70..180 degC; switch 1..64; analyzer averages 1..10000, RBW 1 Hz..10 MHz, centre up to
    13.6 GHz, reference level up to 30 dBm) or the bench file's (narrower or wider)."""
    focus = draw(st.sampled_from(FOCUS))
    event(f"focus: {focus}")
    rf_limit, lo_limit = 15.0, 18.0
    loss_rf, loss_lo = draw(_r(0.0, 5.0)), draw(_r(0.0, 5.0))
    chamber_min, chamber_max, volts_max, part_volts, current = -55.0, 125.0, 5.5, 5.5, 0.2
    channel_rf = 2
    safe_supply: str | float = draw(st.sampled_from(["off", 0.0, 3.3]))
    safe_chamber: str | float = draw(st.sampled_from(["off", 25.0]))
    rf_hz = draw(_r(0.5, 5.5, 3)) * 1e9
    rf_power, lo_power = draw(_r(-40.0, 0.0)), draw(_r(0.0, 10.0))
    gain = -7.0
    temperature = draw(st.none() | _r(-40.0, 100.0, 0))
    supply = draw(st.none() | _r(1.0, 5.0))
    read = draw(st.lists(st.sampled_from(['"lo_at_rf"', '"supply_current"',
                                          '"input_power"']), unique=True, max_size=2))
    analyzer: list[str] = []
    if focus == "rf_frequency":
        rf_hz = draw(_r(5.9, 6.1, 4)) * 1e9
    elif focus == "lo_frequency":
        rf_hz = 70e6 + draw(_r(1.0, 20.0)) * 1e3  # the LO 1 kHz to 20 kHz
    elif focus == "level_profile":  # the bench allows more than the instrument
        rf_limit = 25.0
        rf_power = draw(_r(14.0, 20.0))
    elif focus == "level_low":
        rf_power = draw(_r(-140.0, -125.0))
    elif focus == "level_bench":
        rf_limit = draw(_r(-10.0, 19.0))
        rf_power = rf_limit - loss_rf + draw(_r(-1.0, 1.0))
    elif focus == "temperature":
        chamber_min, chamber_max = draw(_r(-100.0, -60.0)), draw(_r(170.0, 200.0))
        temperature = draw(_r(-90.0, -60.0, 0) | _r(170.0, 200.0, 0))
    elif focus == "supply":
        volts_max, part_volts = draw(_r(20.0, 40.0)), draw(_r(20.0, 40.0))
        supply = draw(_r(20.0, 40.0))
    elif focus == "current":
        current = draw(st.sampled_from([2.9, 3.0, 3.1, 4.5]))
        read.append('"supply_current"')
    elif focus == "safe_supply":
        volts_max = part_volts = 40.0
        safe_supply = draw(_r(25.0, 35.0))
        supply = supply or 3.3
    elif focus == "safe_chamber":
        chamber_min, chamber_max = -100.0, 200.0
        safe_chamber = draw(_r(-90.0, -60.0, 0) | _r(170.0, 200.0, 0))
        temperature = 25.0 if temperature is None else temperature
    elif focus == "switch":
        # the simulated switch has channels 1..3; the generic profile allows up to 64
        channel_rf = draw(st.sampled_from([2, 3, 65, 70]))
        read.append('"lo_at_rf"')
    elif focus == "averages":
        analyzer.append(f"averages = {draw(st.integers(9990, 10010))}")
    elif focus == "rbw":
        analyzer.append(f"rbw = {_q(draw(_r(5.0, 15.0)), 'MHz')}")
        analyzer.append('span = "100 MHz"')
    elif focus == "centre":
        rf_hz = draw(_r(4.0, 5.0, 3)) * 1e9  # 2×LO + RF near the analyzer's 13.6 GHz
        read.append('{ kind = "mxn", order = 3 }')
    elif focus == "ref_level":
        gain = 20.0
        rf_power = draw(_r(0.0, 14.0))
    if isinstance(safe_supply, float) and safe_supply > min(volts_max, part_volts):
        safe_supply = "off"  # the bench file's own cross-check refuses that (not this test's)
    roles = "\n".join(f'{r} = {{ resource = "{FAKE[r]}", profile = "{p}"'
                      + (f", channels = {{ if = 1, rf = {channel_rf}, lo = 3 }}"
                         if r == "switch" else "") + " }"
                      for r, p in PROFILES.items())
    bench = "\n".join([
        "format = 1", "[bench]", 'name = "generated (fictional)"', "[roles]", roles,
        "[path_loss]", f"rf = {_q(loss_rf, 'dB')}", f"rf2 = {_q(loss_rf, 'dB')}",
        f"lo = {_q(loss_lo, 'dB')}", 'if = "1 dB"', 'rf_port = "1 dB"',
        "[limits]",
        "source_max_power = { " + f"rf = {_q(rf_limit, 'dBm')}, rf2 = {_q(rf_limit, 'dBm')}, "
        f"lo = {_q(lo_limit, 'dBm')}" + " }",
        'analyzer_max_input = "60 dBm"', 'power_meter_max_input = "60 dBm"',
        f"supply_max_voltage = {_q(volts_max, 'V')}", f"supply_max_current = {_q(current, 'A')}",
        f"chamber_min = {_q(chamber_min, 'degC')}", f"chamber_max = {_q(chamber_max, 'degC')}",
        "[limits.part]", 'rf_input_max = "60 dBm"', 'lo_input_max = "60 dBm"',
        f"supply_max = {_q(part_volts, 'V')}",
        "[safe_state]",
        "supply = " + (_q(safe_supply, "V") if isinstance(safe_supply, float) else '"off"'),
        "chamber = " + (_q(safe_chamber, "degC") if isinstance(safe_chamber, float)
                        else '"off"'),
    ]) + "\n"
    conditions = ['settle = "1 ms"', 'soak = "1 s"']
    if temperature is not None:
        conditions.append(f"temperature = {_q(temperature, 'degC')}")
    if supply is not None:
        conditions.append(f"supply = {_q(supply, 'V')}")
    sequence = "\n".join([
        "[part]", 'id = "KX-0001 (fictional)"', f"expected_gain = {_q(gain, 'dB')}",
        'expected_lo_if_isolation = "30 dB"', 'expected_lo_rf_isolation = "30 dB"',
        'expected_rf_if_isolation = "30 dB"',
        "[mixing]", 'if_frequency = "70 MHz"',
        "[conditions]", *conditions,
        *(["[analyzer]", *analyzer] if analyzer else []),
        "[[study]]", 'name = "s"', f"rf_frequency = {_q(rf_hz, 'Hz')}",
        f"rf_power = {_q(rf_power, 'dBm')}", f"lo_power = {_q(lo_power, 'dBm')}",
        "read = [" + ", ".join(dict.fromkeys(['"wanted"', *read])) + "]",
    ]) + "\n"
    return Files(sequence, bench, focus)


@contextmanager
def fake_bench() -> Iterator[VirtualClock]:
    """Simulated instruments behind in-process fake transports (``open_bench`` gets them)."""
    clock = VirtualClock()
    sim = build_sim_instruments(clock=clock)
    handlers = {FAKE[r]: sim.instruments[r].handle for r in ROLES}

    def transport(resource: str, **_kwargs: Any) -> FakeTransport:
        return FakeTransport(handlers[resource], resource=resource)

    with mock.patch.object(connect, "VisaTransport", transport):
        yield clock


class _Sink:
    def write_point(self, *_args: Any, **_kwargs: Any) -> None:
        pass

    def heartbeat(self, *_args: Any, **_kwargs: Any) -> None:
        pass

    def log_event(self, *_args: Any, **_kwargs: Any) -> None:
        pass

    def force_owed_log(self) -> None:
        pass


def check_says(sequence_path: Path, bench_path: Path) -> SweeprigError | None:
    """What the pre-flight check (``sweeprig check``) refuses with, None when it passes."""
    sequence = load_sequence(sequence_path)
    bench = load_bench(bench_path, known_profiles=available_profiles())
    try:
        report = check_limits(sequence, bench)
    except (InputError, SafetyLimitError) as exc:
        return exc
    if report.ok:
        return None
    first = min(report.violations, key=lambda c: (c.violation_index,
                                                   report.checks.index(c)))
    return safety_error(sequence, first)


def run_says(sequence_path: Path, bench_path: Path) -> SweeprigError | None:
    """What a driver refuses with when the engine runs every point and then the safe state,
    with no pre-flight check; None when every setting was sent."""
    sequence = load_sequence(sequence_path)
    bench = load_bench(bench_path, known_profiles=available_profiles())
    with fake_bench() as clock:
        drivers = open_bench(bench, required_roles(sequence), clock=clock)
        try:
            runner = Runner(sequence=sequence, bench=bench, drivers=drivers, store=_Sink(),  # type: ignore[arg-type]
                            run_id=1, clock=clock)
            try:
                runner.run(iter_points(sequence, bench))
            except (InputError, SafetyLimitError) as exc:
                return exc
            state = bench.safe_state
            outcome = make_safe(
                drivers,
                supply_safe_v=None if state.supply == "off" else float(state.supply),
                chamber_idle_c=None if state.chamber == "off" else float(state.chamber))
            if not outcome.ok:
                return SafetyLimitError("; ".join(f"{s}: {e}" for s, e in outcome.failed))
            return None
        finally:
            drivers.close()


def _origin(error: SweeprigError) -> str:
    """The ``file:line: key`` the message names as the limit's origin."""
    text = error.message()
    for marker in ("ops.", "limits.", "safe_state."):
        at = text.find(marker)
        if at >= 0:
            return text[at:].split(")")[0].split(";")[0].split()[0]
    return ""


def _agree(case: Files, folder: Path) -> None:
    here = folder / uuid.uuid4().hex
    here.mkdir()
    sequence, bench = here / "sequence.toml", here / "bench.toml"
    sequence.write_text(case.sequence, encoding="utf-8")
    bench.write_text(case.bench, encoding="utf-8")
    try:
        load_sequence(sequence)
        load_bench(bench, known_profiles=available_profiles())
    except InputError:
        event("a file problem (both refuse before any limit)")
        return
    checked, ran = check_says(sequence, bench), run_says(sequence, bench)
    event("refused" if checked is not None else "passed")
    event(f"{'refused' if checked is not None else 'passed'}: {case.focus}")
    assert (checked is None) == (ran is None), (
        f"check: {checked and checked.message()}\nrun: {ran and ran.message()}\n"
        f"--- sequence\n{case.sequence}--- bench\n{case.bench}")
    if checked is not None and ran is not None and _origin(ran):
        # a plan past several limits may meet them in another order at run time: when the
        # run's limit is one the check also found, the check must name its origin too
        assert type(checked) is type(ran) or _origin(checked) != _origin(ran), (
            checked.message(), ran.message())


@pytest.fixture(scope="module")
def folder(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return tmp_path_factory.mktemp("check-matches-run")


_COMMON = {"deadline": None, "suppress_health_check": [HealthCheck.too_slow]}


@settings(max_examples=60, **_COMMON)  # type: ignore[arg-type]
@given(case=files())
def test_check_refuses_exactly_what_the_drivers_refuse(case: Files, folder: Path) -> None:
    _agree(case, folder)


@pytest.mark.soak
@settings(max_examples=600, **_COMMON)  # type: ignore[arg-type]
@given(case=files())
def test_check_refuses_exactly_what_the_drivers_refuse_long(case: Files, folder: Path) -> None:
    _agree(case, folder)


def test_the_drivers_name_the_profile_not_the_bench(folder: Path) -> None:
    """Failure seen in the field: the run stopped on the profile's 20 dBm and called it "the
    bench's"; both now name the profile's file and line."""
    case = Files(
        sequence="\n".join([
            "[part]", 'id = "KX-0001 (fictional)"', 'expected_gain = "-7 dB"',
            "[mixing]", 'if_frequency = "70 MHz"', "[conditions]", 'settle = "1 ms"',
            "[[study]]", 'name = "s"', 'rf_frequency = "2.4 GHz"', 'rf_power = "19 dBm"',
            'lo_power = "7 dBm"', 'read = ["wanted"]']) + "\n",
        bench="\n".join([
            "format = 1", "[bench]", 'name = "generated (fictional)"', "[roles]",
            *(f'{r} = {{ resource = "{FAKE[r]}", profile = "{PROFILES[r]}" }}'
              for r in ("rf", "lo", "sa")),
            "[path_loss]", 'rf = "3 dB"', "[limits]",
            'source_max_power = { rf = "25 dBm", lo = "25 dBm" }',
            'analyzer_max_input = "60 dBm"', "[limits.part]", 'rf_input_max = "60 dBm"',
            'lo_input_max = "60 dBm"']) + "\n")
    here = folder / "named"
    here.mkdir()
    (here / "s.toml").write_text(case.sequence, encoding="utf-8")
    (here / "b.toml").write_text(case.bench, encoding="utf-8")
    checked = check_says(here / "s.toml", here / "b.toml")
    ran = run_says(here / "s.toml", here / "b.toml")
    assert isinstance(checked, SafetyLimitError) and isinstance(ran, SafetyLimitError)
    for error in (checked, ran):
        text = error.message()
        assert "the rf source's profile 'scpi-source' (drivers/scpi-source.toml:" in text
        assert "ops.power.max) allows at most 20 dBm" in text
        assert "bench's" not in text
    assert "22 dBm" in ran.message() and "nothing was sent" in ran.message()
