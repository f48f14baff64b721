"""The bad-input corpus: every broken file in ``tests/corpus/`` through the entry point a user
would run, expecting a located message with a fix, a non-zero exit, no traceback and, for
``sweeprig run``, no instrument touched.

What each file must produce is in ``tests/corpus/expected.toml``. Entry points per kind:

* sequences: ``sweeprig check FILE`` (built-in simulated bench), ``sweeprig run FILE --bench
  SERVED`` (a simulated bench served in this process, its bench file from
  ``served_bench_text``) and ``sweeprig run FILE --sim``; ``sweeprig plan FILE`` where
  ``expected.toml`` lists it;
* benches: ``sweeprig check`` and ``sweeprig run`` of the demo sequence with ``--bench FILE``
  (and ``sweeprig plan`` where listed); ``check_noise``/``run_noise``: the same with a
  one-point noise-figure sequence, for what only a noise-figure reading checks;
* pathloss (CSV) and touchstone: the same, with a bench file whose ``path_loss.rf`` names the file;
* profiles: ``load_profile(path)``;
* parts: ``load_part(path)`` and ``sweeprig run --sim --sim-bench`` of a description naming it;
* simbench: ``load_sim_bench_description(path)`` and ``sweeprig run --sim --sim-bench FILE``;
* golden (golden-figures files of the sequence tests): ``load_golden(path)``;
* lab: scenarios on the lab database (a URL, a server state, a queue), see
  :mod:`tests.robustness.lab_cases`.

"Nothing touched" is checked on the served bench (no message received by any instrument, every
setting as before, every output off) and, for runs that would start their own simulated bench
(``--sim``, bench files with ``resource = "sim"``), by watching ``start_sim_bench``: a bench it
started must have received nothing either.

Cases that expose a bug are ``xfail(strict=True)`` with the bug named in ``expected.toml``.

Files git cannot hold (a FIFO, a link to ``/dev/zero``, a symlink loop, a 700 MB file) are
made at test time: their entry says ``generate = "<shape>"`` and no file of that name is in the
corpus (see :func:`_generate`). Cases marked ``bounded = true`` must be refused within
:data:`MAX_CASE_BYTES` of Python allocations (traced here; the perf variant in
``tests/perf/test_perf_corpus.py`` runs each in its own process and checks wall time and
peak memory of the whole process).
"""

from __future__ import annotations

import gc
import os
import re
import tomllib
import traceback
import tracemalloc
import warnings
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest
from typer.testing import CliRunner

import sweeprig.engine.session as session_module
import sweeprig.sim.bench as sim_bench_module
from sweeprig.cli.main import app
from sweeprig.clock import VirtualClock
from sweeprig.engine.safe import SafeOutcome
from sweeprig.engine.session import RunOutcome, served_bench_text, shipped_sequences_dir
from sweeprig.errors import SweeprigError
from sweeprig.instruments.profile import load_profile
from sweeprig.seqtest.golden import load_golden
from sweeprig.sim.bench import SimBench, load_sim_bench_description
from sweeprig.sim.mixer import load_part
from tests.robustness.lab_cases import SECRET, run_lab_case

CORPUS = Path(__file__).resolve().parents[1] / "corpus"
SUPPORT = CORPUS / "_support"
EXPECTED: dict[str, dict[str, Any]] = tomllib.loads(
    (CORPUS / "expected.toml").read_text(encoding="utf-8"))
KINDS = ("sequences", "benches", "pathloss", "touchstone", "profiles", "parts", "simbench",
         "calibrations", "nights", "golden", "lab")
ENTRIES: dict[str, tuple[str, ...]] = {
    "sequences": ("check", "run_bench", "run_sim"),
    "benches": ("check", "run"),
    "pathloss": ("check", "run"),
    "touchstone": ("check", "run"),
    "profiles": ("load_profile",),
    "parts": ("load_part", "run_sim_bench"),
    "simbench": ("load_sim_bench_description", "run_sim_bench"),
    "calibrations": ("run_sim",),
    "nights": ("run_sim",),
    "golden": ("load_golden",),
    "lab": ("lab",),
}
QUICK = shipped_sequences_dir() / "demo" / "quick.toml"
TINY = SUPPORT / "tiny-sequence.toml"
NOISE = SUPPORT / "noise-sequence.toml"
#: A message longer than this buries its point (the longest good ones are under 1,000).
MAX_MESSAGE_CHARS = 3000
SOURCE_AND_SUPPLY_ROLES = ("rf", "rf2", "lo", "dc")
#: Most Python memory a bounded case may allocate while being refused (the issue's figure).
MAX_CASE_BYTES = 300 * 1024 * 1024
#: A sparse file this large: refused from its size, never read.
SPARSE_BYTES = 700 * 1024 * 1024

@dataclass(frozen=True)
class Outcome:
    """What an entry point did: exit code, the text the user saw, a traceback if any."""

    exit_code: int
    message: str
    traceback: str | None = None


def _cases() -> Iterator[Any]:
    for rel, spec in sorted(EXPECTED.items()):
        kind = rel.split("/", 1)[0]
        entries = spec.get("entries", ENTRIES[kind])
        for entry in entries:
            marks = []
            if "xfail" in spec and entry in spec.get("xfail_entries", entries):
                marks.append(pytest.mark.xfail(strict=True, reason=spec["xfail"]))
            yield pytest.param(rel, entry, marks=marks, id=f"{rel}::{entry}")


# -- running the entry points -----------------------------------------------------------------


@pytest.fixture(scope="module", autouse=True)
def _command_built_once() -> Iterator[None]:
    """typer's test runner rebuilds the click command on every call (~20 ms, most of a case's
    time); build it once for the module. Left alone if typer's internals change."""
    import typer.testing

    if not callable(getattr(typer.testing, "_get_command", None)):
        yield
        return
    built = typer.testing._get_command(app)
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(typer.testing, "_get_command", lambda _app: built)
        yield


def _cli(*args: object) -> Outcome:
    result = CliRunner().invoke(app, [str(a) for a in args], env={"COLUMNS": "200"})
    exc = result.exception
    tb = None
    if exc is not None and not isinstance(exc, SystemExit):
        tb = "".join(traceback.format_exception(exc))
    return Outcome(result.exit_code, result.output, tb)


def _load(loader: Callable[[Path], object], path: Path) -> Outcome:
    try:
        loader(path)
    except SweeprigError as exc:
        return Outcome(exc.exit_code, exc.message())
    except Exception as exc:  # the bug this test looks for
        return Outcome(1, "", "".join(traceback.format_exception(exc)))
    return Outcome(0, "(loaded without an error)")


def _toml_string(path: Path) -> str:
    """``path`` as a TOML literal string (forward slashes, no escapes needed)."""
    return "'" + path.absolute().as_posix() + "'"  # not resolved: it may be a link loop


def _bench_with_rf_loss(template: str, key: str, table: Path) -> str:
    """``template`` (a bench file) with ``path_loss.rf`` read from ``table``."""
    text, count = re.subn(r'^rf = "3\.0 dB"$', f"rf = {{ {key} = {_toml_string(table)} }}",
                          template, flags=re.M)
    assert count == 1, "the simulated bench file no longer has rf = \"3.0 dB\""
    return text


# -- the simulated benches that must stay untouched ----------------------------------------------


#: The real function, whatever the ``started`` fixture puts in its place.
START_SIM_BENCH = sim_bench_module.start_sim_bench


@pytest.fixture(scope="module")
def served() -> Iterator[SimBench]:
    """One simulated bench served in this process for the whole module."""
    with START_SIM_BENCH(clock=VirtualClock()) as bench:
        yield bench


@pytest.fixture(scope="module")
def served_bench_file(served: SimBench, tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("served") / "served-bench.toml"
    path.write_text(served_bench_text(served.resources), encoding="utf-8")
    return path


@pytest.fixture
def started(monkeypatch: pytest.MonkeyPatch) -> list[SimBench]:
    """Every simulated bench ``sweeprig run`` starts for itself during the test."""
    benches: list[SimBench] = []

    def watching(*args: Any, **kwargs: Any) -> SimBench:
        bench = START_SIM_BENCH(*args, **kwargs)
        benches.append(bench)
        return bench

    monkeypatch.setattr(sim_bench_module, "start_sim_bench", watching)
    if hasattr(session_module, "start_sim_bench"):  # should the import move to the top
        monkeypatch.setattr(session_module, "start_sim_bench", watching)
    return benches


def _snapshot(bench: SimBench) -> dict[str, Any]:
    """Messages received per role and every setting's value per role."""
    return {
        "messages": {role: bench.faults.for_role(role).command_count for role in bench.resources},
        "settings": {role: {name: inst.value(name) for name in inst.settings()}
                     for role, inst in bench.instruments.items()},
    }


def _assert_untouched(bench: SimBench, before: dict[str, Any] | None = None, *,
                      identified: bool = False) -> None:
    after = _snapshot(bench)
    if before is None:  # a bench the run started: not a word heard (bar identification)
        assert identified or all(n == 0 for n in after["messages"].values()), after["messages"]
    else:
        assert after == before, "an instrument was touched by a refused run"
    for role in SOURCE_AND_SUPPLY_ROLES:
        assert not bench.instruments[role].output_on, f"{role} output is on"


# -- the corpus ---------------------------------------------------------------------------------


@pytest.mark.parametrize(("rel", "entry"), list(_cases()))
def test_corpus_file_is_refused_with_a_located_message(
    rel: str, entry: str, request: pytest.FixtureRequest, tmp_path: Path
) -> None:
    spec = EXPECTED[rel]
    kind = rel.split("/", 1)[0]
    path = CORPUS / rel
    watched: list[SimBench] | None = None
    served_bench: SimBench | None = None
    before: dict[str, Any] | None = None

    if (kind in ("sequences", "benches", "pathloss", "touchstone") and entry.startswith("run")) \
            or kind == "lab":
        served_bench = request.getfixturevalue("served")
        before = _snapshot(served_bench)
    if entry in ("run_sim", "run_sim_bench", "calibrate_sim") or (
            kind == "benches" and entry in ("run", "run_noise")):
        watched = request.getfixturevalue("started")

    if "generate" in spec:
        path = _generate(spec["generate"], rel, tmp_path / "generated")
    bounded = bool(spec.get("bounded"))
    if bounded:
        tracemalloc.start()
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", ResourceWarning)
            outcome = _run_entry(kind, entry, path, tmp_path, request, served_bench)
            if kind == "touchstone":  # read by scikit-rf: a file it leaves open shows here, now
                gc.collect()
    finally:
        peak = tracemalloc.get_traced_memory()[1] if bounded else 0
        if bounded:
            tracemalloc.stop()
    assert peak <= MAX_CASE_BYTES, f"{peak / 2**20:,.0f} MiB allocated to refuse it"
    leaks = [str(w.message) for w in caught if issubclass(w.category, ResourceWarning)]

    if outcome.traceback is not None:
        pytest.fail(f"a traceback instead of a message:\n{outcome.traceback}")
    message = outcome.message
    assert "Traceback" not in message
    assert outcome.exit_code == spec["exit"], f"exit code {outcome.exit_code}:\n{message[:2000]}"
    missing = [fragment for fragment in spec["contains"] if fragment not in message]
    assert not missing, f"the message lacks {missing}:\n{message[:2000]}"
    present = [fragment for fragment in spec.get("not_contains", []) if fragment in message]
    assert not present, f"the message holds {present}:\n{message[:2000]}"
    assert kind != "lab" or SECRET not in message, "the database password was shown"
    assert "fix:" in message, f"the message has no fix:\n{message[:2000]}"
    error = message[max(message.rfind("error: "), 0):]  # plan prints its tables first
    assert len(error) <= MAX_MESSAGE_CHARS, f"a message of {len(error):,} characters"
    assert not leaks, f"a file was left open: {leaks}"
    if served_bench is not None:
        _assert_untouched(served_bench, before)
    for bench in watched or []:  # "identifies": refused only once the *IDN? replies are known
        _assert_untouched(bench, identified=bool(spec.get("identifies")))


def _run_entry(kind: str, entry: str, path: Path, tmp_path: Path,
               request: pytest.FixtureRequest, served_bench: SimBench | None) -> Outcome:
    """Run one entry point of the corpus on ``path`` (see the module docstring)."""
    store = ("--store", tmp_path / "runs.sqlite", "--quiet")
    if kind == "lab":
        return run_lab_case(path, tmp_path, request, _cli)
    if kind == "sequences":
        if entry in ("check", "plan"):
            return _cli(entry, path)
        if entry == "run_bench":
            return _cli("run", path, "--bench", request.getfixturevalue("served_bench_file"),
                        *store)
        return _cli("run", path, "--sim", *store)
    if kind == "benches":  # *_noise: with a noise-figure sequence (what only it checks)
        sequence = NOISE if entry.endswith("_noise") else QUICK
        if entry in ("check", "plan", "check_noise"):
            return _cli(entry.removesuffix("_noise"), sequence, "--bench", path)
        return _cli("run", sequence, "--bench", path, *store)
    if kind in ("pathloss", "touchstone"):
        bench = served_bench or request.getfixturevalue("served")
        bench_file = tmp_path / "bench.toml"
        key = "csv" if kind == "pathloss" else "touchstone"
        bench_file.write_text(_bench_with_rf_loss(served_bench_text(bench.resources), key, path),
                              encoding="utf-8")
        return _cli("check", QUICK, "--bench", bench_file) if entry == "check" else _cli(
            "run", QUICK, "--bench", bench_file, *store)
    if kind == "calibrations":
        return _cli("run", QUICK, "--sim", "--calibration", path, *store)
    if kind == "nights":
        return _cli("night", path, "--sim", *store)
    if kind == "profiles":
        return _load(load_profile, path)
    if kind == "golden":
        return _load(load_golden, path)
    if kind == "parts":
        if entry == "load_part":
            return _load(load_part, path)
        description = tmp_path / "description.toml"
        description.write_text(f"part = {_toml_string(path)}\n", encoding="utf-8")
        return _cli("run", TINY, "--sim", "--sim-bench", description, *store)
    if entry == "load_sim_bench_description":
        return _load(load_sim_bench_description, path)
    if entry == "calibrate_sim":  # a bench that only a calibration finds wrong
        out = tmp_path / "cal.toml"
        outcome = _cli("calibrate", QUICK, "--sim", "--sim-bench", path, "--out", out)
        assert not out.exists(), "a refused calibration wrote its file"
        return outcome
    return _cli("run", TINY, "--sim", "--sim-bench", path, *store)


# -- files made at test time --------------------------------------------------------------------


#: What each ``generate`` shape makes (see :func:`_generate`).
SHAPES = ("fifo", "dev-zero", "symlink-loop", "self-link", "sparse-700mb", "directory", "toml-3mib",
          "include-fifo", "include-dev-zero", "include-symlink-loop", "include-sparse-700mb",
          "include-self-link", "include-directory")
#: What a generated include is merged into, per kind.
INCLUDE_BASES = {"sequences": TINY, "benches": SUPPORT / "bench-sim-like.toml",
                 "simbench": SUPPORT / "simbench-minimal.toml"}


def _generate(shape: str, rel: str, folder: Path) -> Path:
    """Make the file of ``rel``'s name in ``folder`` in the given shape; return its path.

    ``include-<shape>``: a valid file of the case's kind (from ``_support``) that includes a
    sibling of that shape.
    """
    assert shape in SHAPES, f"unknown shape {shape!r}; known: {SHAPES}"
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / Path(rel).name
    if shape.startswith("include-"):
        kind = rel.split("/", 1)[0]
        target = _generate(shape.removeprefix("include-"), f"{kind}/special{path.suffix}",
                           folder)
        base = INCLUDE_BASES[kind].read_text(encoding="utf-8")
        path.write_text(f"include = ['{target.name}']\n{base}", encoding="utf-8")
    elif shape == "fifo":
        os.mkfifo(path)
    elif shape == "dev-zero":
        path.symlink_to("/dev/zero")
    elif shape == "symlink-loop":
        other = path.with_name(path.name + ".loop")
        other.symlink_to(path.name)
        path.symlink_to(other.name)
    elif shape == "self-link":
        path.symlink_to(path.name)
    elif shape == "sparse-700mb":
        with path.open("wb") as handle:  # a hole: 700 MB on paper, nothing on disk
            handle.truncate(SPARSE_BYTES)
    elif shape == "toml-3mib":  # real content, above the TOML cap, below the data-table cap
        path.write_text("# padding\n" * (3 * 1024 * 1024 // 10), encoding="utf-8")
    else:  # directory
        path.mkdir()
    return path


# -- the corpus itself --------------------------------------------------------------------------


def test_the_watch_on_started_benches_sees_a_run(started: list[SimBench], tmp_path: Path) -> None:
    """The "nothing touched" check is not empty: a valid run is seen, and seen talking."""
    outcome = _cli("run", TINY, "--sim", "--store", tmp_path / "runs.sqlite", "--quiet")
    assert outcome.traceback is None and outcome.exit_code == 0, outcome.message
    assert len(started) == 1
    assert sum(_snapshot(started[0])["messages"].values()) > 0


def _corpus_files() -> set[str]:
    return {f"{kind}/{p.name}" for kind in KINDS for p in (CORPUS / kind).iterdir()}


GENERATED = {rel for rel, spec in EXPECTED.items() if "generate" in spec}


def test_every_corpus_file_has_an_expectation_and_back() -> None:
    files = _corpus_files()
    on_disk = set(EXPECTED) - GENERATED
    assert files == on_disk, (sorted(files - on_disk), sorted(on_disk - files))
    assert not files & GENERATED, "a generated case also has a file"
    assert len(files) >= 60


@pytest.mark.parametrize("rel", sorted(EXPECTED))
def test_corpus_file_says_what_is_broken(rel: str) -> None:
    spec = EXPECTED[rel]
    if "no_comment" in spec or "generate" in spec:
        return
    first = (CORPUS / rel).read_bytes().split(b"\n", 1)[0]
    marker = b"!" if rel.startswith("touchstone/") else b"#"
    assert first.startswith(marker) and len(first.strip()) > 5, f"no comment line: {first[:60]!r}"


# -- found while building the corpus, shown on valid input ----------------------------------------


def test_csv_loss_table_with_a_comment_line_and_a_header_loads(tmp_path: Path) -> None:
    table = tmp_path / "rf-cable.csv"
    table.write_text("# rf cable, measured 2024 (fictional)\nfreq_hz, loss_db\n2.0e9, 2.9\n"
                     "2.6e9, 3.2\n", encoding="utf-8")
    bench = tmp_path / "bench.toml"
    template = (shipped_sequences_dir() / "benches" / "sim.toml").read_text(encoding="utf-8")
    bench.write_text(_bench_with_rf_loss(template, "csv", table), encoding="utf-8")
    outcome = _cli("check", QUICK, "--bench", bench)
    assert outcome.traceback is None
    assert outcome.exit_code == 0, outcome.message


def test_run_whose_safe_state_failed_exits_non_zero(
    monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    import sweeprig.cli.run_cmd as run_cmd

    def finished_but_unsafe(*_args: Any, **_kwargs: Any) -> RunOutcome:
        return RunOutcome(
            run_id=1, status="complete", reason="complete; SAFE STATE INCOMPLETE: supply",
            points_done=1, points_total=1, store_path=tmp_path / "s.sqlite",
            log_path=tmp_path / "run-1.log", sim_elapsed_s=0.0, wall_elapsed_s=0.0,
            predicted_bench_s=0.0,
            safe=SafeOutcome(done=("rf RF off",), failed=(("supply to 5 V", "refused"),)),
        )

    monkeypatch.setattr(run_cmd, "run_sequence", finished_but_unsafe)
    outcome = _cli("run", QUICK, "--sim", "--store", tmp_path / "s.sqlite", "--quiet")
    assert outcome.traceback is None
    assert "SAFE STATE INCOMPLETE" in outcome.message
    assert outcome.exit_code != 0
