"""Fuzzing the file loaders: sequence, bench, driver profile, sim-bench description, part.

Three kinds of input:

* arbitrary bytes (and arbitrary text) written to a file, for each loader;
* a valid shipped file, mutated: a key deleted or renamed (also to a near miss), a value
  replaced by another type, garbage, a huge number, NaN or infinity, an empty list or table;
  or, as text, a line duplicated, deleted or cut short — for each loader;
* sequences built from the format's own vocabulary (axes as values, lists and ranges, every
  reading kind, analyzer settings, nesting, two tones, up- and downconversion).

Either the file loads or a :class:`SweeprigError` subclass is raised — nothing else, warnings
included. Sequences that load also go through what ``sweeprig check`` and ``sweeprig plan`` do
next (pre-flight check, duration estimate, the first points of the plan), benches through
the pre-flight check of the demo sequence, and sim-bench descriptions are built into
instruments. Inputs that hit a bug the corpus already shows (``KNOWN_BUGS``) are set aside.
"""

from __future__ import annotations

import itertools
import math
import re
import tomllib
import traceback
import uuid
import warnings
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest
from hypothesis import HealthCheck, event, given, reject, settings
from hypothesis import strategies as st

from sweeprig.engine.session import shipped_sequences_dir
from sweeprig.errors import SweeprigError
from sweeprig.formats.bench import Bench, load_bench
from sweeprig.formats.sequence import load_sequence
from sweeprig.instruments.profile import (
    available_profiles,
    builtin_profile_dirs,
    load_profile_file,
    parse_profile,
)
from sweeprig.plan.duration import estimate_duration
from sweeprig.plan.expand import iter_points
from sweeprig.plan.preflight import check_limits
from sweeprig.sim.bench import (
    BENCHES_DIR,
    build_sim_instruments,
    load_sim_bench_description,
)
from sweeprig.sim.mixer import load_part
from sweeprig.sim.mixer.part import PARTS_DIR

SEQUENCES = shipped_sequences_dir()
CORPUS_SUPPORT = Path(__file__).resolve().parents[1] / "corpus" / "_support"
SIM_BENCH_FILE = SEQUENCES / "benches" / "sim.toml"
QUICK = SEQUENCES / "demo" / "quick.toml"
#: Sequences above this are refused by the loader here, so a mutation cannot make a test slow.
MAX_POINTS = 5_000

FUZZ = settings(max_examples=40, deadline=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


@pytest.fixture(scope="module")
def folder(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return tmp_path_factory.mktemp("fuzz")


@pytest.fixture(scope="module")
def sim_bench() -> Bench:
    return load_bench(SIM_BENCH_FILE, known_profiles=available_profiles())


@pytest.fixture(scope="module")
def quick() -> Any:
    return load_sequence(QUICK)


# -- what each loader does with a file -------------------------------------------------------------


def _sequence(path: Path, sim_bench: Bench, _quick: Any) -> None:
    sequence = load_sequence(path, max_points=MAX_POINTS)
    check_limits(sequence, sim_bench)
    estimate_duration(sequence, sim_bench)
    for _point in itertools.islice(iter_points(sequence, sim_bench), 30):
        pass


def _bench(path: Path, _sim_bench: Bench, quick: Any) -> None:
    bench = load_bench(path, known_profiles=available_profiles())
    check_limits(quick, bench)


def _profile(path: Path, _sim_bench: Bench, _quick: Any) -> None:
    # by text, with a name that is not a file's (so the name-equals-file rule does not stop it
    # before the rest is checked), and by file
    parse_profile(path.read_bytes().decode("utf-8", "replace"), "fuzzed-profile")
    load_profile_file(path)


def _description(path: Path, _sim_bench: Bench, _quick: Any) -> None:
    build_sim_instruments(load_sim_bench_description(path))


def _part(path: Path, _sim_bench: Bench, _quick: Any) -> None:
    load_part(path)


Loader = Callable[[Path, Bench, Any], None]
LOADERS: dict[str, Loader] = {
    "sequence": _sequence, "bench": _bench, "profile": _profile,
    "description": _description, "part": _part,
}
SEEDS: dict[str, list[Path]] = {
    "sequence": [*sorted((SEQUENCES / "demo").glob("*.toml")),
                 CORPUS_SUPPORT / "tiny-sequence.toml"],
    "bench": [SIM_BENCH_FILE],
    "profile": sorted(p for d in builtin_profile_dirs()[:1] for p in d.glob("*.toml")),
    "description": sorted(BENCHES_DIR.glob("*.toml")),
    "part": sorted(PARTS_DIR.glob("*.toml")),
}


#: Bugs already shown (strict xfail) by the corpus and the parser tests: an input that hits
#: one is set aside (``reject``), so the search goes on for new ones. (exception type, text
#: in the message, file the exception comes from, corpus case).
KNOWN_BUGS: tuple[tuple[type[BaseException], str, str, str], ...] = ()


def _known(exc: BaseException) -> str | None:
    """The corpus case of a known bug ``exc`` is an instance of, else None."""
    frames = traceback.extract_tb(exc.__traceback__)
    origin = frames[-1].filename.replace("\\", "/") if frames else ""
    for kind, text, where, case in KNOWN_BUGS:
        if isinstance(exc, kind) and text in str(exc) and where in origin:
            return case
    return None


def _loads_or_refuses(kind: str, path: Path, sim_bench: Bench, quick: Any) -> None:
    """The property: the loader returns, or raises the project's own error."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")  # as in the suite: a warning is a failure
            LOADERS[kind](path, sim_bench, quick)
    except SweeprigError as exc:
        assert exc.what, "an error without a message"
        event(f"refused: {type(exc).__name__}")
    except Exception as exc:
        case = _known(exc)
        if case is None:
            raise
        event(f"known bug: {case}")
        reject()
    else:
        event("loaded")


def _write(folder: Path, data: bytes, name: str = "fuzzed.toml") -> Path:
    here = folder / uuid.uuid4().hex
    here.mkdir()
    path = here / name
    path.write_bytes(data)
    return path


def test_every_loader_has_seed_files() -> None:
    assert all(SEEDS[kind] for kind in LOADERS), {k: len(v) for k, v in SEEDS.items()}


# -- (a) arbitrary bytes ---------------------------------------------------------------------------

#: Text close enough to TOML to get past the parser now and then.
TOMLISH = st.lists(st.one_of(
    st.from_regex(r"\[[a-z_.]{1,12}\]", fullmatch=True),
    st.from_regex(r"[a-z_]{1,12} = (\"[^\"\n]{0,12}\"|-?[0-9]{1,4}(\.[0-9]+)?|true|nan|inf|\[\])",
                  fullmatch=True),
    st.text(max_size=20),
), max_size=12).map("\n".join)
ANY_FILE = st.one_of(st.binary(max_size=400), st.text(max_size=400).map(str.encode),
                     TOMLISH.map(str.encode))


@pytest.mark.parametrize("kind", sorted(LOADERS))
@FUZZ
@given(data=ANY_FILE)
def test_arbitrary_bytes_load_or_are_refused(kind: str, data: bytes, folder: Path,
                                             sim_bench: Bench, quick: Any) -> None:
    _loads_or_refuses(kind, _write(folder, data), sim_bench, quick)


# -- (b) valid files, mutated ------------------------------------------------------------------

KeyPath = tuple[str | int, ...]


def _nodes(data: Any, here: KeyPath = ()) -> Iterator[KeyPath]:
    """Every key path below ``data`` (tables and arrays walked into)."""
    if isinstance(data, dict):
        for key, value in data.items():
            yield (*here, key)
            yield from _nodes(value, (*here, key))
    elif isinstance(data, list):
        for index, value in enumerate(data):
            yield (*here, index)
            yield from _nodes(value, (*here, index))


def _parent(data: Any, path: KeyPath) -> Any:
    for step in path[:-1]:
        data = data[step]
    return data


GARBAGE = st.one_of(
    st.text(max_size=12),
    st.sampled_from(["", "auto", "off", "2.4 GHz", "-10 dBm", "10 dBmW", "3.3 V", "85 degC",
                     "nan dBm", "1e400 Hz", "-1 mW", "0 Hz", "-5 s", "sim", "[/red]",
                     "TCPIP0::192.0.2.1::5025::SOCKET", "../../etc", "scpi-source", "x" * 300]),
    st.booleans(),
    st.integers(min_value=-(2**63), max_value=2**63 - 1),
    st.sampled_from([0, -1, 1, 10**18, -(10**18), 2**63 - 1]),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([math.nan, math.inf, -math.inf, 1e308, -1e308, 5e-324, 0.0, -0.0]),
    st.lists(st.integers(-3, 3), max_size=3),
    st.just([]), st.just({}),
    st.dictionaries(st.sampled_from(["start", "stop", "step", "points", "csv", "scale"]),
                    st.one_of(st.integers(-5, 5), st.text(max_size=5)), max_size=3),
)


def _near_miss(key: str, draw: st.DrawFn) -> str:
    if not key:
        return "x"
    i = draw(st.integers(0, len(key) - 1))
    how = draw(st.sampled_from(["drop", "double", "swap", "upper", "other"]))
    if how == "drop":
        return key[:i] + key[i + 1:] or "x"
    if how == "double":
        return key[:i] + key[i] + key[i:]
    if how == "swap" and i + 1 < len(key):
        return key[:i] + key[i + 1] + key[i] + key[i + 2:]
    if how == "upper":
        return key.upper()
    return draw(st.text(min_size=1, max_size=10))


@st.composite
def mutated(draw: st.DrawFn, seed: Path) -> bytes:
    """The seed file with one to three structural mutations, or one textual one."""
    text = seed.read_text(encoding="utf-8")
    if draw(st.integers(0, 3)) == 0:  # as text: a line duplicated, deleted or cut short
        lines = text.splitlines(keepends=True)
        i = draw(st.integers(0, len(lines) - 1))
        how = draw(st.sampled_from(["duplicate", "delete", "cut"]))
        if how == "duplicate":
            lines.insert(i, lines[i])
        elif how == "delete":
            del lines[i]
        else:
            lines[i] = lines[i][: draw(st.integers(0, len(lines[i])))]
        return "".join(lines).encode("utf-8")
    data = tomllib.loads(text)
    for _ in range(draw(st.integers(1, 3))):
        paths = list(_nodes(data))
        if not paths:
            break
        path = draw(st.sampled_from(paths))
        parent, key = _parent(data, path), path[-1]
        how = draw(st.sampled_from(["delete", "rename", "replace", "replace"]))
        if how == "delete":
            del parent[key]
        elif how == "rename" and isinstance(key, str):
            parent[_near_miss(key, draw)] = parent.pop(key)
        else:
            parent[key] = draw(GARBAGE)
    return toml_text(data).encode("utf-8")


@pytest.mark.parametrize("kind", sorted(LOADERS))
@FUZZ
@given(data=st.data())
def test_mutated_files_load_or_are_refused(kind: str, data: st.DataObject, folder: Path,
                                           sim_bench: Bench, quick: Any) -> None:
    seed = data.draw(st.sampled_from(SEEDS[kind]))
    content = data.draw(mutated(seed))
    # a file named like its seed: a profile's name must be its file's, a part may be relative
    _loads_or_refuses(kind, _write(folder, content, seed.name), sim_bench, quick)


# -- a small TOML writer for the mutated tables ------------------------------------------------

_BARE = re.compile(r"^[A-Za-z0-9_-]+$")


def _key(key: str) -> str:
    return key if _BARE.fullmatch(key) else _string(key)  # "$" would match before a final \n


def _string(text: str) -> str:
    out = []
    for ch in text:
        if ch in '"\\':
            out.append("\\" + ch)
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04X}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def _value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return _string(value)
    if isinstance(value, list):
        return "[" + ", ".join(_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{_key(k)} = {_value(v)}" for k, v in value.items()) + " }"
    raise TypeError(type(value))


def toml_text(data: dict[str, Any]) -> str:
    """``data`` as TOML: scalars first, then ``[table]`` and ``[[array]]`` sections whose
    own sub-tables are written inline."""
    lines = [f"{_key(k)} = {_value(v)}" for k, v in data.items()
             if not isinstance(v, dict) and not (isinstance(v, list) and v
                                                 and all(isinstance(x, dict) for x in v))]
    for key, value in data.items():
        if isinstance(value, dict):
            lines.append(f"\n[{_key(key)}]")
            lines.extend(f"{_key(k)} = {_value(v)}" for k, v in value.items())
        elif isinstance(value, list) and value and all(isinstance(x, dict) for x in value):
            for item in value:
                lines.append(f"\n[[{_key(key)}]]")
                lines.extend(f"{_key(k)} = {_value(v)}" for k, v in item.items())
    return "\n".join(lines) + "\n"


@settings(max_examples=60, deadline=None)
@given(data=st.recursive(
    st.dictionaries(st.text(max_size=6), GARBAGE, max_size=4),
    lambda children: st.dictionaries(st.text(max_size=6), children, max_size=3), max_leaves=12))
def test_the_writer_writes_what_tomllib_reads_back(data: dict[str, Any]) -> None:
    """The helper itself (NaN compared as NaN)."""
    assert _same(tomllib.loads(toml_text(data)), data)


def _same(a: Any, b: Any) -> bool:
    if isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b):
        return True
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(_same(a[k], b[k]) for k in a)
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b, strict=True))
    return type(a) is type(b) and a == b


# -- (c) sequences built from the format's own vocabulary --------------------------------------

RF = st.sampled_from(["900 MHz", "2.3 GHz", "2.4 GHz", "2.45 GHz", "5.8 GHz", 2.45e9,
                     "10 kHz", "6 GHz", "100 GHz"])
IF = st.sampled_from(["10 MHz", "70 MHz", "70 MHz", "450 MHz", "1 GHz", 1e3])
FREQ = st.one_of(RF, IF)
DBM = st.sampled_from(["-60 dBm", "-30 dBm", "-20 dBm", "-10 dBm", "0 dBm", "7 dBm", "1 mW",
                       "-100 dBW", 5, -25.5])
LEVEL = st.sampled_from(["-7 dB", "0 dB", "10 dB", "35 dB", "-60 dBc", 80, -3.5])


def _axis(values: st.SearchStrategy[Any], starts: list[float], widths: list[float],
          steps: st.SearchStrategy[Any], log: bool) -> st.SearchStrategy[Any]:
    """A value, a list, or a range from ``start`` up by one of ``widths`` (by step, or by
    points, linear or log)."""
    start, width = st.sampled_from(starts), st.sampled_from(widths)
    by_step = st.builds(lambda a, w, s: {"start": a, "stop": a + w, "step": s},
                        start, width, steps)
    by_points = st.builds(lambda a, w, n, sc: {"start": a, "stop": a + w, "points": n,
                                               "scale": sc},
                          start, width, st.integers(1, 40),
                          st.sampled_from(["linear", "log"] if log else ["linear"]))
    return st.one_of(values, st.lists(values, min_size=1, max_size=4), by_step, by_points)


def _frequency_axis() -> st.SearchStrategy[Any]:
    return _axis(RF, [9e8, 2.3e9, 2.4e9, 1e4], [1e5, 2e8, 1e9],
                 st.sampled_from(["1 kHz", "10 MHz", "100 MHz", 5e6]), log=True)


def _power_axis() -> st.SearchStrategy[Any]:
    return _axis(DBM, [-60.0, -30.0, -20.0, 0.0], [2.0, 10.0, 30.0],
                 st.sampled_from(["1 dB", "0.5 dB", 2, "7 dB"]), log=False)


ANALYZER = st.fixed_dictionaries({}, optional={
    "rbw": st.sampled_from(["auto", "1 Hz", "1 kHz", "3 MHz", 0]),
    "span": st.sampled_from(["auto", "0 Hz", "10 kHz", "1 GHz"]),
    "attenuation": st.sampled_from(["auto", "0 dB", "70 dB", "12 dB"]),
    "averages": st.sampled_from(["auto", 1, 16])})
READ_ITEM = st.one_of(
    st.sampled_from(["wanted", "lo_at_if", "lo_at_rf", "rf_at_if", "image", "mxn", "im3", "im2",
                     "supply_current", "input_power"]),
    st.fixed_dictionaries({"kind": st.just("mxn")}, optional={
        "order": st.integers(1, 7), "min_frequency": FREQ, "max_frequency": FREQ,
        "attenuation_check": st.booleans(), "analyzer": ANALYZER}),
    st.fixed_dictionaries({"kind": st.sampled_from(["wanted", "im3", "image", "lo_at_rf"])},
                          optional={"analyzer": ANALYZER}),
)


def _kind(item: Any) -> str:
    return item if isinstance(item, str) else item["kind"]


@st.composite
def vocabulary_sequences(draw: st.DrawFn) -> dict[str, Any]:
    part = {"id": "KX-0001 (fictional)", "expected_gain": draw(LEVEL)}
    for key in ("expected_lo_if_isolation", "expected_lo_rf_isolation",
                "expected_rf_if_isolation"):
        if draw(st.booleans()):
            part[key] = draw(LEVEL)
    doc: dict[str, Any] = {"part": part, "mixing": draw(st.fixed_dictionaries(
        {"if_frequency": IF}, optional={"conversion": st.sampled_from(["down", "up"]),
                                          "lo_side": st.sampled_from(["low", "high"])}))}
    doc["conditions"] = draw(st.fixed_dictionaries({"settle": st.just("1 ms")}, optional={
        "supply": st.sampled_from(["3.3 V", ["3.0 V", "3.6 V"], {"start": 3.0, "stop": 3.6,
                                                                  "points": 3}]),
        "temperature": st.sampled_from(["25 degC", ["-40 degC", "85 degC"]]),
        "soak": st.sampled_from(["0 s", "1 min"])}))
    doc["analyzer"] = draw(st.fixed_dictionaries({}, optional={
        "rbw": st.sampled_from(["auto", "10 Hz", "100 kHz"]),
        "mixer_level": st.sampled_from(["-20 dBm", "-40 dBm", "10 dBm"]),
        "noise_margin": st.sampled_from(["10 dB", "0 dB", "60 dB"]),
        "spur_floor": st.sampled_from(["70 dB", "0 dB", "150 dB"])}))
    studies = []
    for k in range(draw(st.integers(1, 3))):
        study = {"name": f"s{k}", "rf_frequency": draw(_frequency_axis()),
                 "rf_power": draw(_power_axis()), "lo_power": draw(_power_axis()),
                 "read": draw(st.lists(READ_ITEM, min_size=1, max_size=4, unique_by=_kind))}
        study.update(draw(st.fixed_dictionaries({}, optional={
            "lo_frequency": _frequency_axis(),
            "tone_spacing": st.sampled_from(["1 MHz", "10 kHz", ["1 MHz", "5 MHz"]]),
            "attenuation_check": st.booleans(),
            "nesting": st.lists(st.sampled_from(["lo_frequency", "lo_power", "tone_spacing",
                                                 "rf_frequency", "rf_power"]), max_size=3),
            "analyzer": st.sampled_from(["auto", {"rbw": "1 kHz"}, {"span": "auto"}])})))
        studies.append(study)
    doc["study"] = studies
    return doc


@settings(max_examples=60, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(doc=vocabulary_sequences())
def test_sequences_from_the_vocabulary_check_and_plan_or_are_refused(
    doc: dict[str, Any], folder: Path, sim_bench: Bench, quick: Any
) -> None:
    path = _write(folder, toml_text(doc).encode("utf-8"), "sequence.toml")
    _loads_or_refuses("sequence", path, sim_bench, quick)
