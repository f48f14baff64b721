"""The planted-measurement corpus: run one case on the simulated bench and judge its outcome.

A case is a folder under ``tests/planted/cases/`` with

* ``sequence.toml``: the sequence (small: a case should take a few seconds);
* ``sim-bench.toml`` (optional): the simulated-bench description that plants the trouble
  (default: :data:`CLEAN_BENCH`, the shipped bench without source level error or harmonics);
* ``bench-extra.toml`` (optional): tables added to the built-in simulated bench file (a
  ``[timebase]`` that states references the simulated bench does not keep, say); a table
  the built-in file has already (``[limits]``, say) takes its place whole;
* ``expect.toml``: what must happen (see :class:`Expectation`).

Every power the engine sets or reads is referred to the DUT's port planes through the built-in
simulated bench file's path losses, and the clean bench's cabling equals them, so a figure can
be compared with the model's own (:func:`sweeprig.sim.mixer.reference_figures`): the truth.

Three outcomes are possible, and the harness checks the one a case expects:

``refused``
    The run is refused before any output is enabled: a :class:`~sweeprig.errors.SweeprigError`
    whose message holds every fragment of ``reason`` and whose exit code is ``exit``.
``flagged``
    The run completes, and every figure named ``figure`` (in ``study`` when given) carries
    ``flag``. When ``wrong_by_db`` is given, at least one of those figures is at least that
    far from the truth (the plant really makes a bad number: a flag on a right number would
    prove nothing).
``right``
    The run completes, and every figure named ``figure`` is within its tolerance of the truth
    (or, for a bound, the truth is on the bound's side), unflagged by any suspect flag.

Whatever the outcome, the run's other figures obey the corpus' rule: **no wrong figure
without a flag**. A figure with a truth (see :func:`truth_of`) is either within its tolerance
of it, or a bound the truth obeys, or carries a flag.
"""

from __future__ import annotations

import math
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from sweeprig.analysis.figures import Figure
from sweeprig.analysis.reduce import RunFigures, reduce_run
from sweeprig.engine.session import run_sequence, served_bench_text
from sweeprig.errors import SweeprigError
from sweeprig.sim.bench import load_sim_bench_description, prepare_part
from sweeprig.sim.mixer import OperatingPoint, ToneInput, reference_figures
from sweeprig.sim.mixer.part import MixerPart
from sweeprig.sim.mixer.reference import ReferenceFigures, line_power_dbm, single_tone_gain_db
from sweeprig.store.sqlite import SqliteRunStore

HERE = Path(__file__).resolve().parent
CASES_DIR = HERE / "cases"
CLEAN_BENCH = HERE / "clean-bench.toml"

#: Tolerance of a figure against the model's truth where the figure states no uncertainty,
#: dB (dBm for levels): the accuracy the clean simulated bench reaches (measured: gain within
#: 0.005 dB, P1dB 0.04 dB, IIP3 0.07 dB; see tests/analysis/test_reduce_sim.py), with room
#: for the analyzer's display noise of a product 20 dB above its floor (about 0.4 dB).
DEFAULT_TOLERANCE_DB: Mapping[str, float] = {
    "conversion_gain": 0.1,
    "small_signal_gain": 0.1,
    "input_p1db": 0.15,
    "iip3": 0.3,
    "iip3_low": 0.3,
    "iip3_high": 0.3,
    "oip3": 0.3,
    "iip2": 1.0,
    "iip2_low": 1.0,
    "lo_if_isolation": 0.5,
    "lo_rf_isolation": 0.5,
    "rf_if_isolation": 0.5,
    "supply_current": 1e-3,
    "spur_dbm": 0.5,
    "noise_figure": 0.2,
}
#: Below this supply (V) the simulated bench's part is unpowered (sim-bench ``[dut]
#: unpowered.below``, default 0.5 V): it leaks, it does not convert.
UNPOWERED_BELOW_V = 0.5
#: Flags that say a figure's number is not to be trusted as it stands. A bound is judged by
#: its side, so bound-making flags are not listed; an inconclusive figure is "flagged".
OUTCOMES = ("refused", "flagged", "right")


@dataclass(frozen=True)
class Expectation:
    """What a case must end in (``expect.toml``).

    ``plant``: one sentence, what the case does wrong. ``outcome``: one of :data:`OUTCOMES`.
    ``figure``/``study``: the figure judged (flagged, right). ``flag``: the cause it must
    carry (flagged). ``wrong_by_db``: how far from the truth the flagged figure must be, at
    least (optional). ``reason``/``exit``: fragments of the refusal's message and its exit
    code (refused). ``warning``: fragments a preflight warning must hold (optional, any
    outcome). ``pending``: the feature the case waits for (the case is an expected failure,
    strict, until it lands); ``pending_rule``: the same for the rule that no figure of the
    case's run is wrong without a flag.
    """

    plant: str
    outcome: str
    figure: str | None = None
    study: str | None = None
    flag: str | None = None
    wrong_by_db: float | None = None
    reason: tuple[str, ...] = ()
    exit: int | None = None
    warning: tuple[str, ...] = ()
    where: Mapping[str, float] = field(default_factory=dict)
    pending: str | None = None
    pending_rule: str | None = None

    @classmethod
    def load(cls, path: Path) -> Expectation:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
        unknown = set(data) - set(cls.__dataclass_fields__)
        if unknown:
            raise ValueError(f"{path}: unknown keys {sorted(unknown)}")
        for key in ("reason", "warning"):
            if key in data:
                data[key] = tuple(data[key])
        expectation = cls(**data)
        if expectation.outcome not in OUTCOMES:
            raise ValueError(f"{path}: outcome {expectation.outcome!r} not in {OUTCOMES}")
        if expectation.outcome != "refused" and expectation.figure is None:
            raise ValueError(f"{path}: a {expectation.outcome} case names its figure")
        if expectation.outcome == "flagged" and expectation.flag is None:
            raise ValueError(f"{path}: a flagged case names its flag")
        if expectation.outcome == "refused" and (
                not expectation.reason or expectation.exit is None):
            raise ValueError(f"{path}: a refused case names its reason and exit code")
        return expectation


@dataclass(frozen=True)
class Case:
    name: str
    folder: Path
    expect: Expectation

    @property
    def sequence(self) -> Path:
        return self.folder / "sequence.toml"

    @property
    def bench_extra(self) -> Path | None:
        extra = self.folder / "bench-extra.toml"
        return extra if extra.is_file() else None

    @property
    def sim_bench(self) -> Path:
        own = self.folder / "sim-bench.toml"
        return own if own.is_file() else CLEAN_BENCH


@dataclass
class CaseResult:
    """A case's run: the refusal, or the reduced run and its events."""

    case: Case
    refusal: SweeprigError | None = None
    run: RunFigures | None = None
    warnings: tuple[str, ...] = ()
    truths: dict[int, ReferenceFigures] = field(default_factory=dict)


def cases() -> list[Case]:
    """Every case of the corpus, by folder name."""
    out = []
    for folder in sorted(p for p in CASES_DIR.iterdir() if p.is_dir()):
        out.append(Case(folder.name, folder, Expectation.load(folder / "expect.toml")))
    return out


def run_case(case: Case, workdir: Path) -> CaseResult:
    """Run ``case`` on its simulated bench into a store in ``workdir``; reduce it."""
    store_path = workdir / "planted.sqlite"
    bench = None
    if case.bench_extra is not None:
        # the built-in simulated bench file (its stated figures the case's bench's, as a run
        # --sim states them) plus the case's tables
        text = served_bench_text({}, load_sim_bench_description(case.sim_bench))
        extra = case.bench_extra.read_text(encoding="utf-8")
        bench = workdir / "bench.toml"
        bench.write_text(_without_tables(text, _table_headers(extra)) + "\n" + extra,
                         encoding="utf-8")
    try:
        outcome = run_sequence(case.sequence, bench, sim=True, sim_description=case.sim_bench,
                               store_path=store_path, log_dir=workdir)
    except SweeprigError as exc:
        return CaseResult(case, refusal=exc)
    with SqliteRunStore(store_path, create=False) as store:
        run = reduce_run(store, outcome.run_id)
    warnings = tuple(e.message for e in run.events if e.kind == "preflight")
    return CaseResult(case, run=run, warnings=warnings)


def _table_headers(text: str) -> set[str]:
    """The table headers (``[limits]``) of a TOML text."""
    return {line.strip() for line in text.splitlines()
            if line.strip().startswith("[") and not line.strip().startswith("[[")}


def _without_tables(text: str, headers: set[str]) -> str:
    """``text`` without the tables whose headers are in ``headers`` (each from its header to
    the next header line)."""
    out: list[str] = []
    skipping = False
    for line in text.splitlines():
        if line.strip().startswith("["):
            skipping = line.strip() in headers
        if not skipping:
            out.append(line)
    return "\n".join(out) + "\n"


# -- the truth ----------------------------------------------------------------------------


def _point_row(run: RunFigures, point: int) -> pd.Series:
    caps = run.captures
    return caps[caps["point"] == point].iloc[0]


def reference_at(result: CaseResult, point: int) -> ReferenceFigures:
    """The model's own figures at a stored point (its probe temperature, supply and drive)."""
    if point not in result.truths:
        part, op, row = _part_and_op(result, point)
        spacing = abs(float(row["rf2_freq_hz"]) - float(row["rf_freq_hz"]))
        result.truths[point] = reference_figures(
            part, op, float(row["lo_freq_hz"]), float(row["lo_power_dbm"]),
            float(row["rf_freq_hz"]),
            tone_spacing_hz=spacing if math.isfinite(spacing) and spacing > 0 else 1e6)
    return result.truths[point]


def truth_of(result: CaseResult, figure: Figure) -> float | None:
    """The model's own value of ``figure`` (None where the corpus has no truth for it)."""
    if not figure.points or figure.name not in DEFAULT_TOLERANCE_DB:
        return None
    assert result.run is not None
    if figure.name == "noise_figure":
        return _noise_figure_truth(result, figure)
    supply_v = float(_point_row(result.run, figure.points[0])["supply_v"])
    if not supply_v >= UNPOWERED_BELOW_V:  # NaN too: no supply set
        return None  # the bench's unpowered part is not the model: no truth (flags judge it)
    ref = reference_at(result, figure.points[0])
    c = figure.conditions
    match figure.name:
        case "conversion_gain":
            return _gain_at_drive(result, figure)
        case "small_signal_gain":
            return ref.conversion_gain_db
        case "input_p1db":
            return ref.input_p1db_dbm
        case "iip3" | "iip3_low" | "iip3_high":
            return ref.iip3_dbm
        case "oip3":
            return ref.oip3_dbm
        case "iip2" | "iip2_low":  # the difference line, at the case's own tone spacing
            return ref.iip2_dbm if math.isfinite(ref.iip2_dbm) else None
        case "lo_if_isolation":
            return float(c["lo_power_dbm"]) - ref.lo_to_if_dbm
        case "lo_rf_isolation":
            return float(c["lo_power_dbm"]) - ref.lo_to_rf_dbm
        case "rf_if_isolation":
            return ref.rf_to_if_isolation_db
        case "supply_current":
            return ref.supply_current_a
        case "spur_dbm":
            return _own_line_dbm(result, figure)
    return None


def _noise_figure_truth(result: CaseResult, figure: Figure) -> float:
    """The model's noise figure at the figure's point (sweeprig.sim.noise_truth), of the
    sideband the figure states, from the figure's own conditions (a low-side LO at the IF;
    the die at the chamber's ambient when the case sets no temperature)."""
    from sweeprig.sim.noise_truth import part_noise_figure

    description = load_sim_bench_description(result.case.sim_bench)
    part = prepare_part(description)
    c = figure.conditions
    rf_hz = float(c["rf_freq_hz"])
    truth = part_noise_figure(part, temperature_c=float(c.get("temperature_c",
                                                             description.chamber.ambient)),
                              supply_v=float(c["supply_v"]),
                              lo_freq_hz=rf_hz - float(c["if_freq_hz"]),
                              lo_power_dbm=float(c["lo_power_dbm"]), rf_freq_hz=rf_hz)
    return truth.ssb_db if c.get("sideband") == "ssb" else truth.dsb_db


def _part_and_op(result: CaseResult, point: int) -> tuple[MixerPart, OperatingPoint, pd.Series]:
    assert result.run is not None
    row = _point_row(result.run, point)
    # the part as it sits on this bench: its leakage paths with the bench's seeded phases
    description = load_sim_bench_description(result.case.sim_bench)
    part = prepare_part(description)
    probe_c = float(row["probe_temperature_c"])
    if not math.isfinite(probe_c):  # no temperature set: the die at the chamber's ambient
        probe_c = float(description.chamber.ambient)
    return part, OperatingPoint(probe_c, float(row["supply_v"])), row


def _gain_at_drive(result: CaseResult, figure: Figure) -> float:
    """The part's single-tone gain at the point's own drive (a gain read 10 dB below P1dB is
    already a few tenths of a dB compressed: that is the part, not an error)."""
    part, op, row = _part_and_op(result, figure.points[0])
    lo = ToneInput(float(row["lo_freq_hz"]), float(row["lo_power_dbm"]))
    return single_tone_gain_db(part, op, lo, float(row["rf_freq_hz"]), float(row["rf_power_dbm"]))


def _own_line_dbm(result: CaseResult, figure: Figure) -> float | None:
    """The part's own output line at a spur's frequency, driven by clean tones (no source
    harmonics): what a spur figure must report, dBm at the DUT output port.

    The engine's ``rf_power_dbm`` and ``lo_power_dbm`` are DUT-plane powers, and the clean
    bench's cabling equals the bench file's path losses, so these are the tones the part gets.
    """
    part, op, row = _part_and_op(result, figure.points[0])
    response = part.evaluate(
        op,
        ToneInput(float(row["lo_freq_hz"]), float(row["lo_power_dbm"])),
        [ToneInput(float(row["rf_freq_hz"]), float(row["rf_power_dbm"]))],
    )
    level = line_power_dbm(response.if_port, float(figure.conditions["freq_hz"]))
    # no line: the part makes nothing there above its model floor (far below any display)
    return level if math.isfinite(level) else part.floor_dbm


def tolerance_of(figure: Figure) -> float:
    """The figure's own expanded uncertainty where it states one, else the corpus default."""
    stated = getattr(figure, "uncertainty_db", None)
    if stated is not None and math.isfinite(stated):
        return float(stated)
    return DEFAULT_TOLERANCE_DB[figure.name]


def error_of(result: CaseResult, figure: Figure) -> float | None:
    """figure − truth (None without a truth)."""
    truth = truth_of(result, figure)
    if truth is None or not math.isfinite(truth) or not math.isfinite(figure.value):
        return None
    return figure.value - truth


def verdict_of(result: CaseResult, figure: Figure) -> str:
    """``"right"`` (within tolerance, or a bound the truth obeys), ``"flagged"`` (carries any
    flag), ``"wrong"`` (neither), or ``"unknown"`` (no truth)."""
    truth = truth_of(result, figure)
    if truth is None or not math.isfinite(truth):
        return "unknown"
    if figure.bound == "<" and truth <= figure.value + tolerance_of(figure):
        return "right"
    if figure.bound == ">" and truth >= figure.value - tolerance_of(figure):
        return "right"
    if figure.bound is None and abs(figure.value - truth) <= tolerance_of(figure):
        return "right"
    return "flagged" if figure.flags else "wrong"


def judged_figures(result: CaseResult) -> list[Figure]:
    """The figures an expectation names."""
    assert result.run is not None
    e = result.case.expect
    return [f for f in result.run.figures if f.name == e.figure
            and (e.study is None or f.conditions.get("study") == e.study)
            and all(f.conditions.get(k) == v for k, v in e.where.items())]
