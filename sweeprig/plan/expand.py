"""Lazy expansion of a sequence into numbered measurement points.

Order (outermost first): temperature, supply voltage, then the studies in file order, and
within a study its axes in nesting order (declared, else lo_frequency, lo_power,
tone_spacing, rf_frequency, rf_power). Point ``index`` runs 0..N−1 and depends only on the
sequence, so the same files always give the same numbering (resume relies on this).
Expansion is a generator; :func:`count_points` and :func:`point_at` never expand.
"""

from __future__ import annotations

from collections.abc import Collection, Iterable, Iterator
from dataclasses import dataclass

from sweeprig.errors import InputError
from sweeprig.formats.bench import Bench
from sweeprig.formats.sequence import DEFAULT_MAX_POINTS, Sequence, Study, check_size
from sweeprig.plan import frequencies as fp
from sweeprig.plan.axes import Axis, axis_from_spec, tidy
from sweeprig.plan.readings import Drive, Reading, ReadingPlanner


@dataclass(frozen=True)
class Point:
    """One measurement point: DUT-plane settings and what to read.

    Powers are at the DUT's port planes, dBm (the engine adds path loss). ``temperature_c``
    is None when the sequence uses no chamber, ``supply_v`` None when it does not control the
    supply. ``rf2_*`` are None outside two-tone studies. ``if_freq_hz`` is the wanted output
    frequency (tone 1). ``axis_index`` gives, per study axis name, this point's position
    along it (for grouping results into sweeps).
    """

    index: int
    study: str
    temperature_c: float | None
    supply_v: float | None
    lo_freq_hz: float
    lo_power_dbm: float
    rf_freq_hz: float
    rf_power_dbm: float
    rf2_freq_hz: float | None
    rf2_power_dbm: float | None
    readings: tuple[Reading, ...]
    if_freq_hz: float = 0.0
    tone_spacing_hz: float | None = None
    study_index: int = 0
    axis_index: tuple[tuple[str, int], ...] = ()

    @property
    def two_tone(self) -> bool:
        return self.rf2_freq_hz is not None

    def describe(self) -> str:
        """One line naming the point and its settings, for messages."""
        parts = [f"point {self.index} (study {self.study!r}"]
        if self.temperature_c is not None:
            parts.append(f"{self.temperature_c:g} degC")
        if self.supply_v is not None:
            parts.append(f"{self.supply_v:g} V")
        parts.append(f"RF {self.rf_freq_hz / 1e6:.6g} MHz at {self.rf_power_dbm:g} dBm")
        if self.rf2_freq_hz is not None:
            parts.append(f"RF2 {self.rf2_freq_hz / 1e6:.6g} MHz at {self.rf2_power_dbm:g} dBm")
        parts.append(f"LO {self.lo_freq_hz / 1e6:.6g} MHz at {self.lo_power_dbm:g} dBm)")
        return ", ".join(parts)


@dataclass(frozen=True)
class StudyBlock:
    """Where one study sits in every temperature × supply pass."""

    study: Study
    study_index: int
    offset: int  # first local index of the study within a pass
    axes: tuple[Axis, ...]  # nesting order, outermost first
    count: int  # points per pass
    if_freq_hz: float | None  # tracked output frequency (None: explicit LO axis)

    def axis(self, name: str) -> Axis | None:
        for a in self.axes:
            if a.name == name:
                return a
        return None

    def unravel(self, local: int) -> tuple[int, ...]:
        """Axis indices (nesting order) of the local-th point of this study."""
        out = []
        for a in reversed(self.axes):
            local, i = divmod(local, a.count)
            out.append(i)
        return tuple(reversed(out))


@dataclass(frozen=True)
class Layout:
    """The arithmetic shape of the whole plan (no point is built)."""

    temperatures: Axis | None
    supplies: Axis | None
    blocks: tuple[StudyBlock, ...]
    pass_size: int  # points per temperature × supply pass
    total: int

    @property
    def n_temperatures(self) -> int:
        return 1 if self.temperatures is None else self.temperatures.count

    @property
    def n_supplies(self) -> int:
        return 1 if self.supplies is None else self.supplies.count

    def study_totals(self) -> dict[str, int]:
        """Points per study over all temperatures and supply voltages."""
        passes = self.n_temperatures * self.n_supplies
        return {b.study.name: b.count * passes for b in self.blocks}

    def locate(self, index: int) -> tuple[int, int, StudyBlock, int]:
        """(temperature index, supply index, study block, local index) of a point index."""
        if not 0 <= index < self.total:
            raise IndexError(f"point index {index} outside 0..{self.total - 1}")
        pass_no, within = divmod(index, self.pass_size)
        t_idx, v_idx = divmod(pass_no, self.n_supplies)
        for block in self.blocks:
            if within < block.offset + block.count:
                return t_idx, v_idx, block, within - block.offset
        raise AssertionError("unreachable")  # pragma: no cover

    def first_index(self, t_idx: int, v_idx: int, block: StudyBlock) -> int:
        """Index of the first point of ``block`` in the given temperature × supply pass."""
        return (t_idx * self.n_supplies + v_idx) * self.pass_size + block.offset


#: Where the chamber is taken to start, degC (room temperature; the duration prediction's
#: ``start_temperature_c`` default too).
AMBIENT_START_C = 23.0


def least_travel_order(values: Iterable[float], start_c: float = AMBIENT_START_C
                       ) -> tuple[float, ...]:
    """Chamber set points in the order that travels least from ``start_c``.

    On a line the shortest tour from a start through every point goes to one end and then to
    the other: set points at or above the start rising, then those below falling, or the
    other way round, whichever side is nearer first (ties: warm side first, so a part is
    never taken cold first without need). Repeated values stay together.
    """
    listed = [float(v) for v in values]
    warm = sorted(v for v in listed if v >= start_c)
    cold = sorted((v for v in listed if v < start_c), reverse=True)
    if not warm or not cold:
        return tuple(warm or cold)
    warm_first = (warm[-1] - start_c) + (warm[-1] - cold[-1])
    cold_first = (start_c - cold[-1]) + (warm[-1] - cold[-1])
    return tuple(warm + cold) if warm_first <= cold_first else tuple(cold + warm)


def layout(sequence: Sequence) -> Layout:
    """The plan's shape: axes, study offsets and counts (cheap; nothing is expanded)."""
    cond = sequence.conditions
    temps = axis_from_spec("temperature", cond.temperature) if cond.temperature is not None \
        else None
    if temps is not None and cond.temperature_order == "least_travel" and temps.count > 1:
        order = least_travel_order(temps.all_values(), AMBIENT_START_C)
        temps = Axis("temperature", "list", temps.count, listed=order)
    supplies = axis_from_spec("supply", cond.supply) if cond.supply is not None else None
    blocks: list[StudyBlock] = []
    offset = 0
    for i, study in enumerate(sequence.study):
        axes = tuple(axis_from_spec(name, study.axis_value(name))  # type: ignore[arg-type]
                     for name in study.nesting_order())
        count = 1
        for a in axes:
            count *= a.count
        blocks.append(StudyBlock(study, i, offset, axes, count, sequence.if_frequency_of(study)))
        offset += count
    n_t = 1 if temps is None else temps.count
    n_v = 1 if supplies is None else supplies.count
    return Layout(temps, supplies, tuple(blocks), offset, offset * n_t * n_v)


def count_points(sequence: Sequence) -> int:
    """Number of points, computed arithmetically (never expands)."""
    return sequence.count_points()


def study_counts(sequence: Sequence) -> dict[str, int]:
    """Points per study over all temperatures and supply voltages."""
    return layout(sequence).study_totals()


#: A pre-flight keeps every point it plans for the run when there are at most this many
#: (about 1.5 kB a point with its readings: some 30 MB), so a point is planned once.
KEEP_ALL_MAX_POINTS = 20_000


class PointBuilder:
    """Builds points by index (keeps the layout and reading planner between calls)."""

    def __init__(self, sequence: Sequence, bench: Bench | None,
                 keep: Collection[int] = (), *, keep_all_if_small: bool = False) -> None:
        """``keep``: indices whose points are kept once built, for a second reader of the
        same points (the pre-flight's settings check and its risk survey plan the same
        points once; keep few: each kept point holds its readings). ``keep_all_if_small``:
        keep every point when there are at most :data:`KEEP_ALL_MAX_POINTS` (the pre-flight
        plans them all, and the run then takes them as they are)."""
        self.sequence = sequence
        self.bench = bench
        self.layout = layout(sequence)
        self.planner = ReadingPlanner(sequence, bench)
        self.conversion = sequence.mixing.conversion
        self.lo_side = sequence.mixing.lo_side
        self.keeps_all = keep_all_if_small and self.layout.total <= KEEP_ALL_MAX_POINTS
        self._keep: Collection[int] = (range(self.layout.total) if self.keeps_all
                                       else frozenset(keep))
        self._kept: dict[int, Point] = {}
        self._image_reading: dict[int, tuple[Study, object, bool]] = {}

    def point(self, index: int) -> Point:
        """The point with ``index`` and its planned readings (a kept one as built before)."""
        kept = self._kept.get(index)
        if kept is not None:
            return kept
        point = self._build(index)
        if index in self._keep:
            self._kept[index] = point
        return point

    def take(self, index: int) -> Point:
        """The point with ``index``, no longer kept once taken (built if it was not)."""
        kept = self._kept.pop(index, None)
        return kept if kept is not None else self._build(index)

    def _reads_image(self, study: Study) -> bool:
        """Whether ``study`` reads the image response (asked at every point: answered once
        per study and ``read`` list, both kept with the answer so an id is never another
        object's)."""
        kept = self._image_reading.get(id(study))
        if kept is None or kept[0] is not study or kept[1] is not study.read:
            kept = (study, study.read, any(r.kind == "image" for r in study.readings()))
            self._image_reading[id(study)] = kept
        return kept[2]

    def _build(self, index: int) -> Point:
        lay = self.layout
        t_idx, v_idx, block, local = lay.locate(index)
        idx = block.unravel(local)
        values = {a.name: a.value(i) for a, i in zip(block.axes, idx, strict=True)}
        f_rf = values["rf_frequency"]
        p_rf = values["rf_power"]
        p_lo = values["lo_power"]
        if block.if_freq_hz is None:
            f_lo = values["lo_frequency"]
        else:
            f_lo = tidy(fp.lo_for_if(f_rf, block.if_freq_hz, self.conversion, self.lo_side))
        spacing = values.get("tone_spacing")
        f2 = tidy(f_rf + spacing) if spacing is not None else None
        p2 = p_rf if spacing is not None else None
        drive = Drive(f_lo, p_lo, f_rf, p_rf, f2, p2)
        study = block.study
        if self._reads_image(study) and fp.image_hz(f_rf, f_lo) <= 0:
            raise InputError(
                f"point {index}: no image frequency (2·LO − RF = "
                f"{fp.image_hz(f_rf, f_lo) / 1e6:g} MHz is not above 0)",
                where=self.sequence.where(("study", block.study_index, "read")),
                fix="remove the image reading from this study, or change the frequency plan")
        return Point(
            index=index,
            study=study.name,
            temperature_c=lay.temperatures.value(t_idx) if lay.temperatures else None,
            supply_v=lay.supplies.value(v_idx) if lay.supplies else None,
            lo_freq_hz=f_lo,
            lo_power_dbm=p_lo,
            rf_freq_hz=f_rf,
            rf_power_dbm=p_rf,
            rf2_freq_hz=f2,
            rf2_power_dbm=p2,
            readings=self.planner.readings(study, drive),
            if_freq_hz=float(fp.wanted_output_hz(f_rf, f_lo, self.conversion, self.lo_side)),
            tone_spacing_hz=spacing,
            study_index=block.study_index,
            axis_index=tuple((a.name, i) for a, i in zip(block.axes, idx, strict=True)),
        )


def iter_points(sequence: Sequence, bench: Bench | None = None, *, start: int = 0,
                stop: int | None = None, max_points: int = DEFAULT_MAX_POINTS,
                planned: PointBuilder | None = None) -> Iterator[Point]:
    """Yield points ``start`` .. ``stop``−1 lazily, in index order.

    ``bench`` supplies path losses and the analyzer noise figure for the auto analyzer
    settings (without it: 0 dB losses, 24 dB noise figure). Refuses (InputError) a sequence
    above ``max_points``. Resuming at ``start`` costs nothing for the skipped points.
    ``planned``: a builder of the same sequence and bench that kept its points (the
    pre-flight's, :attr:`~sweeprig.plan.preflight.PreflightReport.points`): its points are
    yielded as they are, and each is let go once yielded.
    """
    check_size(sequence, max_points)
    if planned is not None and planned.keeps_all and planned.sequence is sequence \
            and planned.bench is bench:
        builder = planned
        end = builder.layout.total if stop is None else min(stop, builder.layout.total)
        for index in range(max(start, 0), end):
            yield builder.take(index)
        return
    builder = PointBuilder(sequence, bench)
    end = builder.layout.total if stop is None else min(stop, builder.layout.total)
    for index in range(max(start, 0), end):
        yield builder.point(index)


def point_at(sequence: Sequence, index: int, bench: Bench | None = None) -> Point:
    """The point with ``index`` (IndexError outside 0..N−1), without expanding the others."""
    return PointBuilder(sequence, bench).point(index)
