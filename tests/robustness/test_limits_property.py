"""Safety limits cannot be bypassed.

Random sequence and bench files (random source powers, supply voltages, constant path losses
— negative ones, gain, included —, random limits, and included fragments whose values the
including file overrides) go through the real loader and pre-flight check; what is not
refused is run by the real engine (``open_bench`` + ``Runner``) against the simulated
instruments, reached through in-process fake transports that record every command. Then:

* no command that sets a source's power above ``limits.source_max_power`` of its role, and
  no supply voltage above ``limits.supply_max_voltage`` and ``limits.part.supply_max``, was
  ever sent (the recorded SCPI is parsed: the shipped profiles' ``set`` templates and any
  other SCPI spelling of ``[SOURce]:POWer`` / ``[SOURce]:VOLTage``), and no simulated
  instrument ever held such a setting;
* the same holds with the pre-flight check skipped: the drivers' own limits, narrowed to the
  bench file's by ``open_bench``, refuse before sending;
* a few runs go end to end through ``run_sequence`` and a simulated bench served on loopback
  sockets, recording what each instrument received.

The limits the checks use are worked out here from the generated values (fragment, then the
including file's overrides), not read back from the loaded bench, so a merge that lost an
override would show. Direct tests: a driver whose limit was tightened refuses a value above
it and sends nothing, and a limit is never widened. And at the DUT's port plane: replaying
what the sources received, the DUT RF port never takes more than the part's rating, not even
between the commands of one point (tone changes, frequency steps with a loss table, the image
reading's retune).
"""

from __future__ import annotations

import math
import re
import uuid
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any
from unittest import mock

import numpy as np
import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

import sweeprig.engine.connect as connect
from sweeprig.clock import VirtualClock
from sweeprig.engine.connect import open_bench
from sweeprig.engine.runner import Runner
from sweeprig.engine.safe import make_safe
from sweeprig.engine.session import load_run_files, run_sequence
from sweeprig.errors import InputError, SafetyLimitError
from sweeprig.formats.bench import load_bench
from sweeprig.formats.sequence import load_sequence, required_roles
from sweeprig.instruments import available_profiles, load_profile, make_driver
from sweeprig.plan.expand import iter_points
from sweeprig.sim.bench import SimBench, build_sim_instruments, start_sim_bench
from sweeprig.transport.fake import FakeTransport

SOURCE_ROLES = ("rf", "rf2", "lo")
ROLES = (*SOURCE_ROLES, "sa", "dc")
#: "≤ limit" allows this relative float noise, as the pre-flight check and the drivers do
#: (commands also carry values as %.12g).
TOLERANCE = 1e-9


def within(value: float, limit: float) -> bool:
    """``value`` ≤ ``limit`` up to float noise (1e-9, relative above 1)."""
    return value <= limit + TOLERANCE * max(1.0, abs(value))

_NODE = r"(?::LEV(?:EL)?)?(?::IMM(?:EDIATE)?)?(?::AMPL(?:ITUDE)?)?"
#: Any SCPI spelling of the setting commands (short or long form, optional SOURce node).
POWER_HEADER = re.compile(rf"^:?(?:SOUR(?:CE)?\d*:)?POW(?:ER)?{_NODE}$", re.IGNORECASE)
VOLTAGE_HEADER = re.compile(rf"^:?(?:SOUR(?:CE)?\d*:)?VOLT(?:AGE)?{_NODE}$", re.IGNORECASE)


def _template_header(profile: str, op: str) -> re.Pattern[str]:
    """The header of a shipped profile's ``set`` template, as a pattern."""
    (template,) = load_profile(profile).op(op).commands
    header = template.split()[0]
    return re.compile("^" + re.escape(header) + "$", re.IGNORECASE)


SETTERS: dict[str, tuple[re.Pattern[str], ...]] = {
    "power": (_template_header("scpi-source", "power"), POWER_HEADER),
    "voltage": (_template_header("scpi-supply", "voltage"), VOLTAGE_HEADER),
}


def set_values(command: str, what: str) -> list[str]:
    """The argument of every message unit of ``command`` that sets ``what``."""
    found = []
    for unit in command.split(";"):
        header, _, argument = unit.strip().partition(" ")
        if any(p.match(header) for p in SETTERS[what]):
            found.append(argument.strip())
    return found


# -- what the generated files say the limits are ------------------------------------------------


@dataclass(frozen=True)
class Case:
    """One generated bench + sequence: the files' text and the limits they amount to."""

    bench_fragment: str
    bench_main: str
    sequence_fragment: str
    sequence_main: str
    source_max_dbm: dict[str, float]
    supply_max_v: float | None


def _q(value: float, unit: str) -> str:
    return f'"{value:g} {unit}"'


def _inline(items: dict[str, str]) -> str:
    return "{ " + ", ".join(f"{k} = {v}" for k, v in items.items()) + " }"


def _rounded(low: float, high: float, digits: int = 1) -> st.SearchStrategy[float]:
    return st.floats(low, high).map(lambda x: round(x, digits))


# Ranges chosen so that roughly half the cases pass the pre-flight check and run.
POWER = _rounded(-45.0, 8.0)
LO_POWER = _rounded(-10.0, 7.0)
LOSS = _rounded(-10.0, 10.0)
SOURCE_LIMIT = _rounded(0.0, 18.0)
VOLTS = _rounded(0.5, 6.5, 2)


@st.composite
def cases(draw: st.DrawFn, resources: dict[str, str]) -> Case:
    """A bench fragment + an including bench file, and a sequence fragment + sequence."""
    # limits and losses: a fragment gives them all, the including file overrides some
    frag_src = {r: draw(SOURCE_LIMIT) for r in SOURCE_ROLES}
    main_src = {r: v for r in SOURCE_ROLES if (v := draw(st.none() | SOURCE_LIMIT)) is not None}
    frag_loss = {c: draw(LOSS) for c in ("rf", "rf2", "lo", "if")}
    main_loss = {c: v for c in ("rf", "lo") if (v := draw(st.none() | LOSS)) is not None}
    frag_vmax, main_vmax, part_vmax = draw(VOLTS), draw(st.none() | VOLTS), draw(VOLTS)
    rf_max, lo_max = draw(_rounded(0.0, 25.0)), draw(_rounded(0.0, 25.0))

    bench_fragment = "\n".join([
        "# fragment: every limit and loss, some overridden by the including file",
        "[path_loss]",
        *(f"{c} = {_q(v, 'dB')}" for c, v in frag_loss.items()),
        "[limits]",
        "source_max_power = " + _inline({r: _q(v, "dBm") for r, v in frag_src.items()}),
        f"supply_max_voltage = {_q(frag_vmax, 'V')}",
        'supply_max_current = "200 mA"',
        'analyzer_max_input = "30 dBm"',
    ]) + "\n"
    roles = "\n".join(f'{r} = {{ resource = "{resources[r]}", profile = "{p}" }}' for r, p in (
        ("rf", "scpi-source"), ("rf2", "scpi-source"), ("lo", "scpi-source"),
        ("sa", "scpi-analyzer"), ("dc", "scpi-supply"), ("simctl", "sim-control"))
        if r in resources)
    main_lines = ['include = ["fragment.toml"]', '[bench]', 'name = "generated (fictional)"',
                  "[roles]", roles, "[path_loss]",
                  *(f"{c} = {_q(v, 'dB')}" for c, v in main_loss.items()), "[limits]"]
    if main_src:
        main_lines.append("[limits.source_max_power]")
        main_lines.extend(f"{r} = {_q(v, 'dBm')}" for r, v in main_src.items())
    main_lines.append("[limits.part]")
    main_lines.append(f"rf_input_max = {_q(rf_max, 'dBm')}")
    main_lines.append(f"lo_input_max = {_q(lo_max, 'dBm')}")
    main_lines.append(f"supply_max = {_q(part_vmax, 'V')}")
    bench_main = "\n".join(main_lines) + "\n"
    if main_vmax is not None:  # a top-level override of one key of a fragment's table
        bench_main = bench_main.replace("[limits]\n", f"[limits]\nsupply_max_voltage = "
                                        f"{_q(main_vmax, 'V')}\n", 1)

    # what the files amount to (the including file wins over its fragment)
    source_max = {r: main_src.get(r, frag_src[r]) for r in SOURCE_ROLES}
    loss = {c: main_loss.get(c, frag_loss[c]) for c in ("rf", "rf2", "lo")}
    supply_max = min(main_vmax if main_vmax is not None else frag_vmax, part_vmax)
    # half the cases are built inside every limit (margins down to zero), half anywhere
    inside = draw(st.booleans())
    margin = _rounded(0.0, 15.0)

    def under(ceiling: float, low: float) -> float:
        return max(low, math.floor((ceiling - draw(margin)) * 10.0) / 10.0)

    # the sequence: a fragment with the part and plan, studies in the including file
    if inside:
        supply = [math.floor(min(v, supply_max) * 100.0) / 100.0
                  for v in draw(st.lists(VOLTS, min_size=1, max_size=2))]
    else:
        supply = draw(st.none() | st.lists(VOLTS, min_size=1, max_size=2))
    sequence_fragment = "\n".join([
        "# fragment: the part and the frequency plan",
        "[part]", 'id = "KX-0001 (fictional)"', 'expected_gain = "-7 dB"',
        'expected_lo_if_isolation = "30 dB"', 'expected_rf_if_isolation = "30 dB"',
        "[mixing]", 'if_frequency = "70 MHz"',
        "[conditions]", 'settle = "1 ms"',
        *([f"supply = [{', '.join(_q(v, 'V') for v in supply)}]"] if supply else []),
    ]) + "\n"
    studies = []
    for k in range(draw(st.integers(1, 2))):
        two_tone = draw(st.booleans())
        n_rf, n_lo = draw(st.integers(1, 3)), draw(st.integers(1, 2))
        if inside:
            rf_ceiling = min(source_max["rf"] - loss["rf"], rf_max - (
                10.0 * math.log10(2.0) if two_tone else 0.0))
            if two_tone:
                rf_ceiling = min(rf_ceiling, source_max["rf2"] - loss["rf2"])
            lo_ceiling = min(source_max["lo"] - loss["lo"], lo_max)
            rf_powers = [under(rf_ceiling, -60.0) for _ in range(n_rf)]
            lo_powers = [under(lo_ceiling, -30.0) for _ in range(n_lo)]
        else:
            rf_powers = [draw(POWER) for _ in range(n_rf)]
            lo_powers = [draw(LO_POWER) for _ in range(n_lo)]
        read = draw(st.sampled_from([["wanted"], ["supply_current"], ["wanted",
                                                                      "supply_current"]]))
        lines = ["[[study]]", f'name = "s{k}"', 'rf_frequency = "2.4 GHz"',
                 f"rf_power = [{', '.join(_q(p, 'dBm') for p in rf_powers)}]",
                 f"lo_power = [{', '.join(_q(p, 'dBm') for p in lo_powers)}]",
                 "read = [" + ", ".join(f'"{r}"' for r in read) + "]"]
        if two_tone:
            lines.insert(3, 'tone_spacing = "1 MHz"')
        studies.append("\n".join(lines))
    override_supply = None if inside else draw(st.none() | st.lists(VOLTS, min_size=1,
                                                                    max_size=2))
    head = ['include = ["fragment.toml"]']
    if override_supply is not None:
        head += ["[conditions]", f"supply = [{', '.join(_q(v, 'V') for v in override_supply)}]"]
    sequence_main = "\n".join(head) + "\n\n" + "\n\n".join(studies) + "\n"

    return Case(bench_fragment, bench_main, sequence_fragment, sequence_main, source_max,
                supply_max)


def write_case(case: Case, folder: Path) -> tuple[Path, Path]:
    """Write the four files into fresh subfolders; returns (sequence, bench)."""
    here = folder / uuid.uuid4().hex
    (here / "bench").mkdir(parents=True)
    (here / "sequence").mkdir()
    (here / "bench" / "fragment.toml").write_text(case.bench_fragment, encoding="utf-8")
    bench = here / "bench" / "bench.toml"
    bench.write_text(case.bench_main, encoding="utf-8")
    (here / "sequence" / "fragment.toml").write_text(case.sequence_fragment, encoding="utf-8")
    sequence = here / "sequence" / "sequence.toml"
    sequence.write_text(case.sequence_main, encoding="utf-8")
    return sequence, bench


# -- checking what was sent ---------------------------------------------------------------------


@dataclass
class Recorder:
    """Every command each simulated instrument received, and any setting it took above its
    limit (the instrument's own view, whatever the command's spelling)."""

    commands: list[tuple[str, str]] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)

    def wrap(self, role: str, instrument: Any, case: Case) -> Callable[[str], Any]:
        handle = instrument.handle
        setting = {"rf": "power_dbm", "rf2": "power_dbm", "lo": "power_dbm",
                   "dc": "voltage_v"}.get(role)
        limit = case.supply_max_v if role == "dc" else case.source_max_dbm.get(role)

        def recording(message: str) -> Any:
            self.commands.append((role, message))
            before = instrument.value(setting) if setting else None
            reply = handle(message)
            if setting and limit is not None:
                held = float(instrument.value(setting))
                # a shared instrument may still hold an earlier run's value: judge changes
                if held != before and not within(held, limit):
                    self.problems.append(f"{role} took {held:g} after {message!r} "
                                         f"(limit {limit:g})")
            return reply

        return recording


def assert_within_limits(recorder: Recorder, case: Case) -> None:
    """No recorded command set a power or voltage above its limit, and none was held."""
    bad = list(recorder.problems)
    for role, command in recorder.commands:
        what = "power" if role in SOURCE_ROLES else "voltage" if role == "dc" else None
        if what is None:
            continue
        limit = case.source_max_dbm[role] if what == "power" else case.supply_max_v
        for argument in set_values(command, what):
            try:
                value = float(argument)
            except ValueError:
                bad.append(f"{role}: {command!r} sets {what} to a non-number")
                continue
            if not math.isfinite(value) or limit is None or not within(value, limit):
                bad.append(f"{role}: {command!r} above the limit {limit}")
    assert not bad, bad


class _Sink:
    """The run store the runner writes to, reduced to what it calls."""

    def __init__(self) -> None:
        self.points = 0

    def write_point(self, *_args: Any, **_kwargs: Any) -> None:
        self.points += 1

    def heartbeat(self, *_args: Any, **_kwargs: Any) -> None:
        pass

    def log_event(self, *_args: Any, **_kwargs: Any) -> None:
        pass

    def force_owed_log(self) -> None:
        pass


FAKE = {role: f"TCPIP0::fake-{role}::5025::SOCKET" for role in ROLES}


@contextmanager
def fake_bench(case: Case) -> Iterator[tuple[Recorder, VirtualClock]]:
    """Simulated instruments behind in-process fake transports (``open_bench`` gets them)."""
    clock = VirtualClock()
    sim = build_sim_instruments(clock=clock)
    recorder = Recorder()
    handlers = {FAKE[r]: recorder.wrap(r, sim.instruments[r], case) for r in ROLES}

    def transport(resource: str, **_kwargs: Any) -> FakeTransport:
        return FakeTransport(handlers[resource], resource=resource)

    with mock.patch.object(connect, "VisaTransport", transport):
        yield recorder, clock


def run_engine(sequence_path: Path, bench_path: Path, clock: VirtualClock, *,
               preflight: bool) -> str:
    """Load, check (unless ``preflight`` is False) and run; returns how it ended."""
    try:
        if preflight:
            files = load_run_files(sequence_path, bench_path, sim=False)
            sequence, bench = files.sequence, files.bench
        else:
            sequence = load_sequence(sequence_path)
            bench = load_bench(bench_path, known_profiles=available_profiles())
    except SafetyLimitError:
        return "refused by the pre-flight check"
    except InputError:
        return "refused: a file problem"
    drivers = open_bench(bench, required_roles(sequence), clock=clock)
    try:
        runner = Runner(sequence=sequence, bench=bench, drivers=drivers, store=_Sink(),
                        run_id=1, clock=clock)
        try:
            runner.run(iter_points(sequence, bench))
        except SafetyLimitError:
            return "stopped by a driver's limit"
        return "complete"
    finally:
        make_safe(drivers, supply_safe_v=None, chamber_idle_c=None)
        drivers.close()


FAKE_SETTINGS = settings(max_examples=40, deadline=None,
                         suppress_health_check=[HealthCheck.too_slow])


@pytest.fixture(scope="module")
def folder(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return tmp_path_factory.mktemp("limits")


@FAKE_SETTINGS
@given(case=cases(FAKE))
def test_refused_by_the_preflight_or_every_command_within_the_limits(
    case: Case, folder: Path
) -> None:
    sequence, bench = write_case(case, folder)
    with fake_bench(case) as (recorder, clock):
        how = run_engine(sequence, bench, clock, preflight=True)
    event(how)
    if how.startswith("refused"):
        assert recorder.commands == [], "a refused run talked to an instrument"
    # what the pre-flight check let through, the drivers' limits must let through too
    assert how != "stopped by a driver's limit"
    assert_within_limits(recorder, case)


@FAKE_SETTINGS
@given(case=cases(FAKE))
def test_without_the_preflight_the_drivers_still_refuse_before_sending(
    case: Case, folder: Path
) -> None:
    sequence, bench = write_case(case, folder)
    with fake_bench(case) as (recorder, clock):
        how = run_engine(sequence, bench, clock, preflight=False)
    event(how)
    assert_within_limits(recorder, case)


def test_a_case_within_the_limits_runs_to_the_end(folder: Path) -> None:
    """The harness itself: a plain case passes the pre-flight check and runs every point."""
    case = _plain_case()
    sequence, bench = write_case(case, folder)
    with fake_bench(case) as (recorder, clock):
        how = run_engine(sequence, bench, clock, preflight=True)
    assert how == "complete"
    assert any(set_values(c, "power") for _, c in recorder.commands)
    assert any(set_values(c, "voltage") for r, c in recorder.commands if r == "dc")
    assert_within_limits(recorder, case)


def test_an_override_lower_than_the_fragment_is_the_limit_in_force(folder: Path) -> None:
    """The including file's tighter source limit wins: 0 dBm would pass the fragment's 15."""
    plain = _plain_case()
    case = Case(plain.bench_fragment, plain.bench_main.replace(
        "[limits.part]", "[limits.source_max_power]\nrf = \"-5 dBm\"\n[limits.part]"),
        plain.sequence_fragment, plain.sequence_main.replace('rf_power = ["-20 dBm"]',
                                                             'rf_power = ["0 dBm"]'),
        {**plain.source_max_dbm, "rf": -5.0}, plain.supply_max_v)
    sequence, bench = write_case(case, folder)
    for preflight in (True, False):
        with fake_bench(case) as (recorder, clock):
            how = run_engine(sequence, bench, clock, preflight=preflight)
        assert how == ("refused by the pre-flight check" if preflight
                       else "stopped by a driver's limit")
        assert_within_limits(recorder, case)


def _plain_case() -> Case:
    """A hand-written case well inside every limit (rf 15, rf2 15, lo 18 dBm; 5.5 V)."""
    resources = FAKE
    fragment = ("[path_loss]\nrf = \"3 dB\"\nrf2 = \"9 dB\"\nlo = \"2 dB\"\nif = \"1.5 dB\"\n"
                "[limits]\nsource_max_power = { rf = \"15 dBm\", rf2 = \"15 dBm\", "
                "lo = \"18 dBm\" }\nsupply_max_voltage = \"5.5 V\"\n"
                "supply_max_current = \"200 mA\"\nanalyzer_max_input = \"30 dBm\"\n")
    roles = "\n".join(f'{r} = {{ resource = "{resources[r]}", profile = "{p}" }}' for r, p in (
        ("rf", "scpi-source"), ("rf2", "scpi-source"), ("lo", "scpi-source"),
        ("sa", "scpi-analyzer"), ("dc", "scpi-supply")))
    main = (f'include = ["fragment.toml"]\n[bench]\nname = "plain (fictional)"\n[roles]\n'
            f"{roles}\n[limits.part]\nrf_input_max = \"15 dBm\"\nlo_input_max = \"18 dBm\"\n"
            "supply_max = \"5.5 V\"\n")
    seq_fragment = ("[part]\nid = \"KX-0001 (fictional)\"\nexpected_gain = \"-7 dB\"\n"
                    "[mixing]\nif_frequency = \"70 MHz\"\n[conditions]\nsettle = \"1 ms\"\n"
                    "supply = [\"3.3 V\"]\n")
    seq_main = ('include = ["fragment.toml"]\n\n[[study]]\nname = "s0"\n'
                'rf_frequency = "2.4 GHz"\nrf_power = ["-20 dBm"]\nlo_power = ["7 dBm"]\n'
                'read = ["wanted", "supply_current"]\n')
    return Case(fragment, main, seq_fragment, seq_main, {"rf": 15.0, "rf2": 15.0, "lo": 18.0},
                5.5)


def test_a_setting_exactly_at_the_limit_passes_the_check_and_runs(folder: Path) -> None:
    """0.1 dBm + 0.2 dB of loss is 0.30000000000000004 dBm: at a 0.3 dBm limit, float noise
    must not stop the run the pre-flight check let through."""
    plain = _plain_case()
    case = Case(plain.bench_fragment.replace('rf = "3 dB"', 'rf = "0.2 dB"').replace(
        'rf = "15 dBm"', 'rf = "0.3 dBm"'), plain.bench_main, plain.sequence_fragment,
        plain.sequence_main.replace('rf_power = ["-20 dBm"]', 'rf_power = ["0.1 dBm"]'),
        {**plain.source_max_dbm, "rf": 0.3}, plain.supply_max_v)
    sequence, bench = write_case(case, folder)
    with fake_bench(case) as (recorder, clock):
        how = run_engine(sequence, bench, clock, preflight=True)
    assert_within_limits(recorder, case)
    assert how == "complete"


def dut_rf_worst_dbm(commands: list[tuple[str, str]],
                     loss_db: dict[str, Callable[[float], float]]) -> float:
    """The highest total power at the DUT RF port after any command rf or rf2 received:
    each source that is on delivers its setting less the path loss at its frequency."""
    state = {r: {"freq": 1e9, "power": -30.0, "on": False} for r in ("rf", "rf2")}
    worst = -math.inf
    for role, command in commands:
        if role not in state:
            continue
        for unit in command.split(";"):
            header, _, argument = unit.strip().partition(" ")
            if re.match(r"^:?(SOUR(CE)?\d*:)?FREQ(UENCY)?(:CW|:FIX(ED)?)?$", header, re.I):
                state[role]["freq"] = float(argument)
            elif any(p.match(header) for p in SETTERS["power"]):
                state[role]["power"] = float(argument)
            elif re.match(r"^:?OUTP(UT)?(:STAT(E)?)?$", header, re.I):
                state[role]["on"] = argument.strip().upper() in ("ON", "1")
        total_mw = sum(10.0 ** ((s["power"] - loss_db[r](s["freq"])) / 10.0)
                       for r, s in state.items() if s["on"])
        if total_mw > 0:
            worst = max(worst, 10.0 * math.log10(total_mw))
    return worst


def test_the_dut_rf_port_never_takes_more_than_its_rating_between_points(folder: Path) -> None:
    """Both tones at 5 dBm (8 dBm in all), then one tone at 10 dBm: the rating is 10 dBm.
    Raising rf before switching rf2 off would put 11.2 dBm on the port for a moment."""
    plain = _plain_case()
    two_then_one = (
        'include = ["fragment.toml"]\n\n[[study]]\nname = "two-tone"\n'
        'rf_frequency = "2.4 GHz"\ntone_spacing = "1 MHz"\nrf_power = ["5 dBm"]\n'
        'lo_power = ["7 dBm"]\nread = ["wanted"]\n\n[[study]]\nname = "one-tone"\n'
        'rf_frequency = "2.4 GHz"\nrf_power = ["10 dBm"]\nlo_power = ["7 dBm"]\n'
        'read = ["wanted"]\n')
    case = Case(plain.bench_fragment.replace('rf2 = "15 dBm"', 'rf2 = "20 dBm"'),
                plain.bench_main.replace('rf_input_max = "15 dBm"', 'rf_input_max = "10 dBm"'),
                plain.sequence_fragment.replace('supply = ["3.3 V"]\n', ""), two_then_one,
                {**plain.source_max_dbm, "rf2": 20.0}, plain.supply_max_v)
    sequence, bench = write_case(case, folder)
    with fake_bench(case) as (recorder, clock):
        how = run_engine(sequence, bench, clock, preflight=True)
    assert how == "complete"
    worst = dut_rf_worst_dbm(recorder.commands, {"rf": lambda _f: 3.0, "rf2": lambda _f: 9.0})
    assert within(worst, 10.0), f"the DUT RF port took {worst:.2f} dBm (rating 10 dBm)"


#: rf cable: 8 dB up to 2.3 GHz, falling to 0 dB at 2.5 GHz (a table the format allows).
CABLE_CSV = "freq_hz, loss_db\n2.0e9, 8.0\n2.3e9, 8.0\n2.5e9, 0.0\n2.7e9, 0.0\n"


def _cable_loss_db(freq_hz: float) -> float:
    return float(np.interp(freq_hz, [2.0e9, 2.3e9, 2.5e9, 2.7e9], [8.0, 8.0, 0.0, 0.0]))


def _run_with_cable_table(folder: Path, sequence_main: str) -> tuple[str, float]:
    """Run ``sequence_main`` with the CSV rf cable and a 12 dBm DUT RF rating; returns how it
    ended and the highest DUT RF power after any command."""
    plain = _plain_case()
    case = Case(plain.bench_fragment.replace('rf = "3 dB"', 'rf = { csv = "rf-cable.csv" }')
                .replace('rf = "15 dBm"', 'rf = "20 dBm"'),
                plain.bench_main.replace('rf_input_max = "15 dBm"', 'rf_input_max = "12 dBm"'),
                plain.sequence_fragment.replace('supply = ["3.3 V"]\n', ""), sequence_main,
                {**plain.source_max_dbm, "rf": 20.0}, plain.supply_max_v)
    sequence, bench = write_case(case, folder)
    (bench.parent / "rf-cable.csv").write_text(CABLE_CSV, encoding="utf-8")
    with fake_bench(case) as (recorder, clock):
        how = run_engine(sequence, bench, clock, preflight=True)
    return how, dut_rf_worst_dbm(recorder.commands, {"rf": _cable_loss_db,
                                                     "rf2": lambda _f: 9.0})


# Guards for two fixed engine bugs: a source's new frequency used to go out before its new
# power (so the old, higher level met a lower-loss frequency), and the image reading retuned
# the RF source without setting the power for the image frequency's path loss.


def test_a_frequency_step_never_puts_more_than_the_rating_on_the_dut(folder: Path) -> None:
    how, worst = _run_with_cable_table(folder, (
        'include = ["fragment.toml"]\n[[study]]\nname = "step"\n'
        'rf_frequency = ["2.3 GHz", "2.5 GHz"]\nrf_power = ["10 dBm"]\nlo_power = ["7 dBm"]\n'
        'read = ["wanted"]\n'))
    assert how == "complete"
    assert within(worst, 12.0), f"the DUT RF port took {worst:.2f} dBm (rating 12 dBm)"


def test_the_image_reading_keeps_the_dut_power_the_sequence_asks(folder: Path) -> None:
    how, worst = _run_with_cable_table(folder, (
        'include = ["fragment.toml"]\n[mixing]\nlo_side = "high"\n[[study]]\nname = "image"\n'
        'rf_frequency = ["2.3 GHz"]\nif_frequency = "100 MHz"\nrf_power = ["10 dBm"]\n'
        'lo_power = ["7 dBm"]\nread = ["wanted", "image"]\n'))
    assert how == "complete"
    assert within(worst, 10.0), f"the DUT RF port took {worst:.2f} dBm (asked: 10 dBm)"


# -- end to end through run_sequence and a served simulated bench ---------------------------------


@pytest.fixture(scope="module")
def served(tmp_path_factory: pytest.TempPathFactory) -> Iterator[SimBench]:
    """A simulated bench served on loopback sockets; bench locks kept in a folder of ours."""
    locks = tmp_path_factory.mktemp("locks")
    with pytest.MonkeyPatch.context() as patch, start_sim_bench(clock=VirtualClock()) as bench:
        patch.setenv("SWEEPRIG_LOCK_DIR", str(locks))
        yield bench


@settings(max_examples=6, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_end_to_end_on_a_served_bench(data: st.DataObject, served: SimBench,
                                      folder: Path) -> None:
    case = data.draw(cases(dict(served.resources)))
    sequence, bench = write_case(case, folder)
    recorder = Recorder()
    originals = {r: served.instruments[r].handle for r in ROLES}
    for role in ROLES:
        served.instruments[role].handle = recorder.wrap(role, served.instruments[role], case)
    try:
        try:
            outcome = run_sequence(sequence, bench, store_path=sequence.parent / "runs.sqlite")
        except (SafetyLimitError, InputError):
            assert recorder.commands == [], "a refused run talked to an instrument"
            event("refused")
        else:
            event(f"run {outcome.status}")
            for role in SOURCE_ROLES:
                assert not served.instruments[role].output_on, f"{role} output left on"
    finally:
        for role, handle in originals.items():
            served.instruments[role].handle = handle
    assert_within_limits(recorder, case)


# -- the drivers themselves ---------------------------------------------------------------------


def _driver(profile: str, role: str) -> tuple[Any, FakeTransport]:
    clock = VirtualClock()
    sim = build_sim_instruments(clock=clock)
    transport = FakeTransport(sim.instruments[role].handle)
    return make_driver(load_profile(profile), role, transport, clock=clock), transport


@settings(max_examples=60, deadline=None)
@given(limit=st.floats(-60.0, 20.0), value=st.floats(-130.0, 20.0))
def test_a_tightened_source_refuses_a_power_above_its_limit_and_sends_nothing(
    limit: float, value: float
) -> None:
    source, transport = _driver("scpi-source", "rf")
    source.tighten_limit("power", max_value=limit)
    if not within(value, limit):
        with pytest.raises(SafetyLimitError) as info:
            source.set_power(value)
        assert transport.sent == []
        assert "nothing was sent" in info.value.what and "caution" in (info.value.fix or "")
    else:
        assert source.set_power(value)
        (command,) = transport.sent
        (argument,) = set_values(command, "power")
        assert within(float(argument), limit)


@settings(max_examples=40, deadline=None)
@given(limit=st.floats(0.0, 30.0), value=st.floats(0.0, 30.0))
def test_a_tightened_supply_refuses_a_voltage_above_its_limit_and_sends_nothing(
    limit: float, value: float
) -> None:
    supply, transport = _driver("scpi-supply", "dc")
    supply.tighten_limit("voltage", max_value=limit)
    if not within(value, limit):
        with pytest.raises(SafetyLimitError):
            supply.set_voltage(value)
        assert transport.sent == []
    else:
        supply.set_voltage(value)
        (argument,) = set_values(transport.sent[0], "voltage")
        assert within(float(argument), limit)


def test_a_limit_is_never_widened() -> None:
    source, transport = _driver("scpi-source", "rf")
    source.tighten_limit("power", max_value=5.0)
    source.tighten_limit("power", max_value=19.0)  # looser: ignored
    assert source.limits("power")[1] == 5.0
    with pytest.raises(SafetyLimitError):
        source.set_power(6.0)
    assert transport.sent == []


def test_open_bench_narrows_the_drivers_to_the_bench_limits(folder: Path) -> None:
    """Bench limits below the profile's are in force; one above it does not widen it."""
    case = _plain_case()
    case = Case(case.bench_fragment.replace('rf = "15 dBm"', 'rf = "25 dBm"'), case.bench_main
                .replace('supply_max = "5.5 V"', 'supply_max = "3.6 V"'), case.sequence_fragment,
                case.sequence_main, case.source_max_dbm, 3.6)
    sequence, bench = write_case(case, folder)
    with fake_bench(case) as (_recorder, clock):
        seq = load_sequence(sequence)
        drivers = open_bench(load_bench(bench), required_roles(seq), clock=clock)
        try:
            assert drivers.rf is not None and drivers.lo is not None and drivers.dc is not None
            assert drivers.rf.limits("power")[1] == 20.0  # the profile's own maximum stays
            assert drivers.lo.limits("power")[1] == 18.0
            assert drivers.dc.limits("voltage")[1] == 3.6  # the part's rating, the lower cap
            assert drivers.dc.limits("current_limit")[1] == pytest.approx(0.2)
        finally:
            drivers.close()
