"""0 level violations on the wire, whatever the profile and the sequence of settings.

Random profiles of a source, a supply and a chamber — level commands spelled in odd but valid
SCPI ways (long and short forms, numeric suffixes, optional nodes, other case, unit suffixes,
a dialect whose level header is only ``LEVel``), value maps and ``prepare`` commands with
injected separators, line breaks, control characters and extra level-setting commands — go
through the real profile loader, and (to act out a loader that missed something) the same
injections are put straight into the loaded profile. Random bench limits and random
sequences of settings, actions and raw messages then drive the real driver, through the
last-step guard, into a :class:`FakeTransport` that records what reached the wire.

The oracle reads the recorded messages on its own, as an instrument would and more
suspiciously: every unit split at ``;`` and line breaks (quotes ignored), the SCPI-99 path
rules for compound commands, any header whose last node (optional nodes removed) names the
level, values with their unit suffixes; a keyword or an unreadable value on a level command
counts as a violation. 0 violations over the default suite's examples, and over 10,000 under
the ``soak`` marker (``pytest -m soak``); 200 in the default suite.

Also: every injected map entry is refused by the loader (with a located message), so the
guard is the second line, not the only one.
"""

from __future__ import annotations

import contextlib
import dataclasses
import functools
import math
import re
from dataclasses import dataclass

import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st
from hypothesis.errors import InvalidArgument

from sweeprig.errors import InputError, SafetyLimitError
from sweeprig.instruments import make_driver
from sweeprig.instruments.driver import Driver
from sweeprig.instruments.profile import Operation, Profile, parse_profile
from sweeprig.transport.fake import FakeTransport


@dataclass(frozen=True)
class Kind:
    """What the test knows about one guarded instrument kind."""

    kind: str
    op: str
    profile_max: float
    spellings: tuple[str, ...]  # level command headers the profile may use
    suffixes: tuple[str, ...]  # unit suffixes after {value} in the template
    oracle_words: frozenset[str]  # last header node of a level command (oracle)
    other_ops: str  # the rest of a valid profile


SOURCE = Kind(
    "source", "power", 20.0,
    ("SOUR:POW:LEV:IMM:AMPL", ":SOURce:POWer", "POW", "pow:lev", "SOUR1:POW:LEV:IMM:AMPL",
     "LEVEL", "source:power:level:immediate:amplitude", "POWer:LEVel:IMMediate"),
    ("", " DBM", "DBM", " dBm"),
    frozenset({"POW", "POWER"}),
    """[ops.frequency]
command = "{freq} {{value}}"
[ops.output]
command = "{outp} {{value}}"
map = {{ on = "ON", off = "OFF" }}
""",
)
SUPPLY = Kind(
    "supply", "voltage", 30.0,
    ("SOUR:VOLT:LEV:IMM:AMPL", "VOLT", ":SOURce1:VOLTage", "volt:lev:imm", "VOLTage:AMPLitude"),
    ("", " V", "V"),
    frozenset({"VOLT", "VOLTAGE", "APPL", "APPLY"}),
    """[ops.current_limit]
command = "CURR {{value}}"
max = "3 A"
[ops.output]
command = "{outp} {{value}}"
map = {{ on = "ON", off = "OFF" }}
[ops.measure_voltage]
query = "MEAS:VOLT?"
[ops.measure_current]
query = "MEAS:CURR?"
""",
)
CHAMBER = Kind(
    "chamber", "setpoint", 180.0,
    ("THER:SETP", "SETP", "TEMP", ":SOURce:TEMPerature", "temp:setp"),
    ("", " CEL", "C"),
    frozenset({"SETP", "TEMP", "TEMPERATURE", "SETPOINT"}),
    """[ops.control]
command = "{outp} {{value}}"
map = {{ on = "ON", off = "OFF" }}
[ops.probe]
query = "PROB?"
[ops.air]
query = "AIR?"
""",
)
KINDS = (SOURCE, SUPPLY, CHAMBER)
SETTING_OF = {"source": "output", "supply": "output", "chamber": "control"}

SEPARATORS = (";", ";:", "\n", "\r\n", ";*CLS;", "\x00", "' ;", "\t;")
LEVEL_VALUES = ("{over}", "19", "30", "MAX", "DEF", "UP", "40 MW", "1e3", "{over} DBM",
                "+{over}", "9E9", "#H20")
DEFAULT_NODES = {"SOUR", "SOURCE", "LEV", "LEVEL", "IMM", "IMMEDIATE", "AMPL", "AMPLITUDE"}


def _profile_toml(kind: Kind, spelling: str, suffix: str, freq: str, outp: str) -> str:
    return f"""[profile]
name = "random-{kind.kind}"
kind = "{kind.kind}"
description = "a random fictional {kind.kind}"
idn_pattern = '^Tarnwick Labs,'

[ops.{kind.op}]
command = "{spelling} {{value}}{suffix}"
max = {kind.profile_max}
""" + kind.other_ops.format(freq=freq, outp=outp)


@st.composite
def payloads(draw: st.DrawFn, kind: Kind, over: float) -> str:
    """One injected command that would set the level (often beyond the limit)."""
    head = draw(st.sampled_from((*kind.spellings, "SOUR2:POW", "APPL", "LEV", "SETP")))
    value = draw(st.sampled_from(LEVEL_VALUES)).format(over=f"{over:g}")
    return f"{head} {value}"


@st.composite
def injections(draw: st.DrawFn, kind: Kind, over: float) -> str:
    """A token or command followed by a separator and a level-setting command."""
    base = draw(st.sampled_from(("ON", "1", "OFF", "0", "OUTP ON", "*RST", "DISP:TEXT 'x")))
    return base + draw(st.sampled_from(SEPARATORS)) + draw(payloads(kind, over))


@st.composite
def cases(draw: st.DrawFn) -> dict[str, object]:
    kind = draw(st.sampled_from(KINDS))
    limit = draw(st.floats(-10.0, kind.profile_max - 1.0).map(lambda v: round(v, 2)))
    over = limit + draw(st.sampled_from((0.01, 0.5, 4.0, 100.0)))
    case: dict[str, object] = {
        "kind": kind,
        "limit": limit,
        "spelling": draw(st.sampled_from(kind.spellings)),
        "suffix": draw(st.sampled_from(kind.suffixes)),
        "freq": draw(st.sampled_from(("FREQ", "SOUR:FREQ:CW", "CW"))),
        "outp": draw(st.sampled_from(("OUTP", "OUTP:STAT", "RF", "OUTPut1:STATe"))),
        "map_on": draw(st.one_of(st.just("ON"), injections(kind, over))),
        "map_off": draw(st.one_of(st.just("OFF"), injections(kind, over))),
        "prepare": draw(st.lists(st.one_of(payloads(kind, over), injections(kind, over)),
                                 max_size=2)),
    }
    steps = st.one_of(
        st.tuples(st.just("level"), st.floats(-200.0, 400.0, allow_nan=False)),
        st.tuples(st.just("level_at"), st.just(0.0)),
        st.tuples(st.just("switch"), st.booleans()),
        st.tuples(st.just("raw"), st.one_of(payloads(kind, over), injections(kind, over))),
        st.tuples(st.just("prepare"), st.just(0.0)),
        st.tuples(st.just("safe"), st.just(0.0)),
    )
    case["steps"] = draw(st.lists(steps, min_size=1, max_size=8))
    return case


# -- the oracle: an instrument's reading of the wire, suspicious --------------------------------

_NUMBER = re.compile(r"([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-z]*)")


def _oracle_value(kind: Kind, arg: str) -> float:
    """The level ``arg`` sets, in the kind's unit; +inf when it cannot be known."""
    match = _NUMBER.fullmatch(arg.strip())
    if match is None:
        return math.inf  # a keyword (MAX, DEF, UP), a non-decimal number, garbage
    number, unit = float(match.group(1)), match.group(2).upper()
    if kind.kind == "source":
        # P[dBm] = 10 log10(P / 1 mW)
        scale = {"": None, "DBM": None, "MW": 1e-3, "W": 1.0}
        if unit not in scale:
            return math.inf
        watts = scale[unit]
        if watts is None:
            return number
        return 10 * math.log10(number * watts / 1e-3) if number > 0 else -math.inf
    scales = {"": 1.0, "V": 1.0, "MV": 1e-3, "CEL": 1.0, "C": 1.0}
    return number * scales[unit] if unit in scales else math.inf


def oracle_levels(kind: Kind, message: str) -> list[tuple[str, float]]:
    """Every (unit, level) the message sets, as the oracle reads it."""
    found: list[tuple[str, float]] = []
    branch: list[str] = []
    for piece in re.split(r"(;|\r\n|\n|\r)", message):
        if piece in (";",):
            continue
        if piece in ("\n", "\r\n", "\r"):
            branch = []
            continue
        unit = piece.replace("\x00", " ").strip()
        if not unit or unit.startswith("*"):
            continue
        head, _, rest = unit.partition(" ") if " " in unit else unit.partition("\t")
        if head.endswith("?"):
            continue
        nodes = [n for n in head.strip(":").upper().split(":") if n]
        path = nodes if head.startswith(":") else branch + nodes
        branch = path[:-1]
        core = [n.rstrip("0123456789") for n in path]
        core = [n for n in core if n not in DEFAULT_NODES]
        if core and core[-1] not in kind.oracle_words:
            continue
        arg = rest.split(",")[0]
        found.append((unit, _oracle_value(kind, arg)))
    return found


# -- the property --------------------------------------------------------------------------------


@functools.lru_cache(maxsize=4096)
def _parsed(text: str, name: str) -> Profile | str:
    """The profile ``text`` loads to, or the loader's message (cached: examples repeat)."""
    try:
        return parse_profile(text, name)
    except InputError as exc:
        return exc.message()


def _note(text: str) -> None:
    """A hypothesis event (nothing outside a hypothesis test)."""
    with contextlib.suppress(InvalidArgument):
        event(text)


def _replies(cmd: str) -> str | None:
    if cmd == "*IDN?":
        return "Tarnwick Labs,RANDOM,1,1.0"
    if cmd == "*OPC?":
        return "1"
    return "0" if cmd.endswith("?") else None


def _run_case(case: dict[str, object]) -> tuple[int, list[str]]:
    """Drive the case; return (level commands seen on the wire, violations)."""
    kind: Kind = case["kind"]  # type: ignore[assignment]
    limit: float = case["limit"]  # type: ignore[assignment]
    clean = _profile_toml(kind, case["spelling"], case["suffix"], case["freq"],  # type: ignore[arg-type]
                          case["outp"])  # type: ignore[arg-type]
    profile = _parsed(clean, f"random-{kind.kind}.toml")
    assert isinstance(profile, Profile)

    setting = SETTING_OF[kind.kind]
    for key, token in (("on", case["map_on"]), ("off", case["map_off"])):
        if token not in ("ON", "OFF"):
            dirty = clean.replace(f'{key} = "{key.upper()}"',
                                  f"{key} = {_toml_string(token)}", 1)  # type: ignore[arg-type]
            refused = _parsed(dirty, f"random-{kind.kind}.toml")
            assert isinstance(refused, str), "an injected map entry was not refused"
            assert f"ops.{setting}.map.{key}" in refused
            _note("injected map entry refused by the loader")

    # Past the loader, as if it had missed them: the guard is all that is left.
    operation = profile.ops[setting]
    ops = dict(profile.ops)
    ops[setting] = dataclasses.replace(
        operation, map={"on": case["map_on"], "off": case["map_off"]})  # type: ignore[dict-item]
    if case["prepare"]:
        ops["prepare"] = Operation(name="prepare", spec=profile.ops["reset"].spec,
                                   commands=tuple(case["prepare"]))  # type: ignore[arg-type]
    profile = dataclasses.replace(profile, ops=ops)

    fake = FakeTransport(_replies)
    driver: Driver = make_driver(profile, "dut", fake)
    if kind.kind == "chamber":
        driver.tighten_limit(kind.op, min_value=-limit - 30.0, max_value=limit)
    else:
        driver.tighten_limit(kind.op, max_value=limit)
    for step, value in case["steps"]:  # type: ignore[attr-defined]
        try:
            if step == "level":
                driver.set_value(kind.op, value)
            elif step == "level_at":
                driver.set_value(kind.op, limit)
            elif step == "switch":
                driver.set_value(setting, value)
            elif step == "raw":
                driver.write(value)
            elif step == "prepare":
                driver.prepare()
            else:
                driver.safe()
        except SafetyLimitError:
            _note("refused: safety limit")
        except InputError:
            _note("refused: input")

    seen, violations = 0, []
    low = -limit - 30.0 if kind.kind == "chamber" else -math.inf
    for message in fake.sent:
        for unit, level in oracle_levels(kind, message):
            seen += 1
            if not low - 1e-9 <= level <= limit + 1e-9 * max(1.0, abs(limit)):
                violations.append(f"{unit!r} (in {message!r}) sets {level} > limit {limit}")
    return seen, violations


def _toml_string(text: str) -> str:
    escaped = text.replace("\\", "\\\\").replace('"', '\\"')
    escaped = escaped.replace("\n", "\\n").replace("\r", "\\r").replace("\t", "\\t")
    escaped = "".join(c if ord(c) >= 32 or c in "\\" else f"\\u{ord(c):04x}" for c in escaped)
    return f'"{escaped}"'


def _check(case: dict[str, object]) -> None:
    seen, violations = _run_case(case)
    _note(f"level commands on the wire: {min(seen, 3)}{'+' if seen > 3 else ''}")
    assert violations == []


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(cases())
def test_no_level_beyond_the_limits_reaches_the_wire(case: dict[str, object]) -> None:
    _check(case)


@pytest.mark.soak
@pytest.mark.timeout(3600)  # about 3 minutes on a quiet machine; far more on a busy one
@settings(max_examples=10_000, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(cases())
def test_no_level_beyond_the_limits_reaches_the_wire_10000(case: dict[str, object]) -> None:
    _check(case)


def test_the_oracle_sees_what_an_instrument_would() -> None:
    """The oracle is not blind: it finds the issue's smuggled command and its value."""
    assert oracle_levels(SOURCE, "OUTP ON;:SOUR:POW 19") == [(":SOUR:POW 19", 19.0)]
    assert oracle_levels(SOURCE, "SOUR:FREQ 1E9;POW 40 MW")[0][1] == pytest.approx(16.0206,
                                                                                  abs=1e-4)
    assert oracle_levels(SOURCE, "POW MAX")[0][1] == math.inf
    assert oracle_levels(SOURCE, "FREQ:CW 1E9;LEV 19") == []  # FREQ:LEV is no level
    assert oracle_levels(SUPPLY, "OUTP ON\nVOLT 3300 MV")[0][1] == pytest.approx(3.3)


def test_the_driver_without_its_guard_would_have_let_the_issue_case_through() -> None:
    """The property is not vacuous: with the guard taken away, the issue's profile puts a
    level beyond the limit on the wire, and the oracle sees it."""
    case = {"kind": SOURCE, "limit": 15.0, "spelling": "SOUR:POW:LEV:IMM:AMPL", "suffix": "",
            "freq": "FREQ", "outp": "OUTP", "map_on": "ON;:SOUR:POW 19", "map_off": "OFF",
            "prepare": [], "steps": [("level", -20.0), ("switch", True)]}
    assert _run_case(case)[1] == []
    import sweeprig.instruments.driver as driver_module

    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(driver_module, "guard_transport", lambda transport, _driver: transport)
        seen, violations = _run_case(case)
    assert seen == 2 and len(violations) == 1 and "19" in violations[0]
