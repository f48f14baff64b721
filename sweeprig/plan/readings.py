"""What to read at one point: the readings, their frequencies and analyzer settings.

The analyzer's "auto" settings follow stated rules (common practice, no single source):

* attenuation: the smallest even number of dB (0–70) that brings the predicted total power
  at the analyzer input down to the sequence's ``analyzer.mixer_level`` at the first mixer;
* RBW: the widest of the 1-3-10 steps (1 Hz to 1 MHz) whose displayed average noise level
  −174 dBm/Hz + NF + attenuation + 10·log10(RBW) sits ``noise_margin`` below the product's
  expected level (or, when that is unknown, ``spur_floor`` below the reference: the wanted
  output at the IF port, the leaking LO at the RF port), and no wider than a tenth of the
  distance to the nearest other known signal;
* span: 20 × RBW, but no wider than the distance to the nearest other known signal;
* reference level: the predicted total input power plus 3 dB, rounded up to 5 dB;
* averages: 1 (averaging a log-detected trace steadies the floor but does not lower it, so it
  buys no margin).

Then the planner predicts what else the analyzer shows at each product (module
:mod:`sweeprig.plan.margins`: its noise, the part's noise, its own distortion, its
compression, reciprocal mixing, the sources' harmonics, neighbours within the RBW) and, for
auto attenuation, raises the attenuation in 2 dB steps from the rule above until the analyzer's
own distortion sits ``distortion_margin`` below the product (the RBW narrowing to keep the
noise ``noise_margin`` below it, within ``max_sweep_time`` per sweep). Where no setting keeps
every margin, the setting with the smallest shortfall is kept and the reading carries its
risks (``Reading.risks``, ``Reading.predicted``). An explicit setting is never overridden; its
risks are predicted the same way. A product of unknown level is judged at the weakest level
the reading is set to see (``spur_floor`` below the reference).

The analyzer-distortion check repeats a reading with 10 dB more input attenuation: a product
made by the DUT keeps its displayed level, one made in the analyzer's first mixer drops
(common practice, no single source).

Predicted levels use the part's expected gain and isolations; an unknown isolation counts as
0 dB (the safe side: the full LO or RF power is assumed to arrive at the analyzer).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from sweeprig.formats.bench import Bench
from sweeprig.formats.pathloss import ConstantLoss, PathLoss
from sweeprig.formats.sequence import AUTO, DISTORTION_KINDS, AnalyzerSettings, Sequence, Study
from sweeprig.plan import frequencies as fp
from sweeprig.plan import harmonic_routes as hr
from sweeprig.plan import margins as mg
from sweeprig.plan import search_window as sw
from sweeprig.plan.noise_setup import NoisePlan, NoiseSettings, plan_noise_attenuation

FloatArray = NDArray[np.float64]

#: Sweep time per sweep ≈ K·span/RBW² (common practice, k ≈ 2–3 for Gaussian RBW filters).
SWEEP_TIME_K = 2.5
#: Shortest sweep of the analyzer, s.
MIN_SWEEP_TIME_S = 1e-3
#: RBW steps (1-3-10) that auto settings choose from, Hz.
RBW_STEPS_HZ: tuple[float, ...] = tuple(
    m * 10.0**e for e in range(0, 7) for m in (1.0, 3.0) if m * 10.0**e <= 1e6
)
#: m×n products below this frequency are not read (lower end of common swept analyzers).
LOWEST_PRODUCT_HZ = 9e3
#: Extra attenuation of the analyzer-distortion check, dB.
ATTENUATION_CHECK_DB = 10.0
MAX_ATTENUATION_DB = 70.0
#: A product within this many RBWs of the reading's frequency reads as part of its level.
LANDS_RBW = 1.5


@dataclass(frozen=True)
class AnalyzerSetup:
    """Resolved analyzer settings of one reading (center at the product frequency)."""

    center_hz: float
    span_hz: float
    rbw_hz: float
    attenuation_db: float
    reference_level_dbm: float
    averages: int

    @property
    def sweep_time_s(self) -> float:
        """One sweep: 2.5·span/RBW² (common practice), at least 1 ms."""
        return max(SWEEP_TIME_K * self.span_hz / self.rbw_hz**2, MIN_SWEEP_TIME_S)

    @property
    def measure_time_s(self) -> float:
        """All averaged sweeps of this reading."""
        return self.sweep_time_s * self.averages


@dataclass(frozen=True)
class Reading:
    """One value to capture at a point.

    ``name``: unique within the point (e.g. ``wanted``, ``im3.lower``, ``mxn.2x-1``,
    ``im3.lower.att10`` for the attenuation-check repeat). ``kind``: the sequence vocabulary.
    ``instrument``: "sa", "pm", "dc" or "noise" (a noise-figure reading: the noise source and
    the analyzer, :mod:`sweeprig.engine.noise_figure`). ``port``: DUT port the analyzer reads
    ("if", "rf", "lo"), None for pm/dc. ``freq_hz``: product frequency (for pm: the RF
    frequency, for the sensor's calibration factor). ``orders``: multipliers of (LO, RF1[, RF2])
    whose |Σ orders·f| is ``freq_hz``. ``rf_retune_hz``: set the RF source here for this reading
    only (image response), then back. ``attenuation_check``: this is the +10 dB repeat of
    ``repeat_of``. ``expected_dbm``: predicted level at the analyzer input, None if unknown.
    ``known_hz``: the other lines the plan expects at this port (tones, leakage, the other
    products of the reading's kind), which the noise-floor estimate masks out of the trace.
    ``risks``: sorted names from :data:`sweeprig.plan.margins.RISKS` of the contributors
    predicted within their margin of the product at the chosen settings; ``predicted``: the
    numbers behind them (None for power-meter and supply readings).
    """

    name: str
    kind: str
    instrument: str
    port: str | None = None
    freq_hz: float | None = None
    orders: tuple[int, ...] | None = None
    analyzer: AnalyzerSetup | None = None
    rf_retune_hz: float | None = None
    attenuation_check: bool = False
    repeat_of: str | None = None
    expected_dbm: float | None = None
    known_hz: tuple[float, ...] = ()
    risks: tuple[str, ...] = ()
    predicted: mg.Prediction | None = None
    noise: NoiseSettings | None = None
    """A noise-figure reading's analyzer settings (:mod:`sweeprig.plan.noise_setup`)."""
    search_hz: float | None = None
    """Half-width of the peak search around ``freq_hz``, Hz (None: read at ``freq_hz``;
    :mod:`sweeprig.plan.search_window`)."""
    offset_bound_hz: float | None = None
    """The largest offset of the product the bench's references explain, Hz."""


@dataclass(frozen=True)
class Drive:
    """The DUT-plane settings of one point (what readings are derived from)."""

    lo_freq_hz: float
    lo_power_dbm: float
    rf_freq_hz: float
    rf_power_dbm: float
    rf2_freq_hz: float | None
    rf2_power_dbm: float | None


def power_sum_dbm(levels_dbm: list[float]) -> float:
    """Total power of incoherent components, dBm."""
    top = max(levels_dbm, default=-math.inf)
    if not math.isfinite(top):
        return top
    # relative to the largest, so that absurd levels cannot overflow
    return top + 10.0 * math.log10(sum(10.0 ** ((p - top) / 10.0) for p in levels_dbm))


#: The part's noise figure when the sequence does not state one, dB (pessimistic for an
#: active mixer; common practice, no source).
DEFAULT_PART_NOISE_FIGURE_DB = 15.0
#: A noise source's ENR when the bench states no table, dB (a common diode source's; from
#: memory).
DEFAULT_ENR_DB = 15.0


class ReadingPlanner:
    """Resolves each study's reading specs into :class:`Reading` objects for a drive."""

    def __init__(self, sequence: Sequence, bench: Bench | None = None) -> None:
        self.sequence = sequence
        self.bench = bench
        self.conversion = sequence.mixing.conversion
        self.lo_side = sequence.mixing.lo_side
        part = sequence.part
        self.gain_db = part.expected_gain
        self.iso_lo_if = part.expected_lo_if_isolation
        self.iso_lo_rf = part.expected_lo_rf_isolation
        self.iso_rf_if = part.expected_rf_if_isolation
        self.nf_db = bench.analyzer_noise_figure_db() if bench is not None else 24.0
        specs_bench = bench if bench is not None else Bench.model_construct(bench=None)
        self.specs = specs_bench.analyzer_specs()
        self.harmonics = {r: specs_bench.source_harmonics_dbc(r) for r in ("rf", "rf2", "lo")}
        nf_part = part.expected_noise_figure
        self.part_nf_assumed = nf_part is None
        self.part_nf_db = nf_part if nf_part is not None else \
            max(DEFAULT_PART_NOISE_FIGURE_DB, -self.gain_db + 3.0)
        self.on_risk = sequence.analyzer.on_risk
        self.defaults = sequence.analyzer
        #: merged analyzer settings by (study layer, reading layer) (:meth:`_settings`)
        self._merged: dict[tuple[int, int], tuple[AnalyzerSettings | None,
                                                  AnalyzerSettings | None,
                                                  AnalyzerSettings]] = {}
        #: source-harmonic contributions on a line, dBc, by what they depend on
        #: (:meth:`_relative_harmonic_dbc`)
        self._relative_dbc: dict[tuple[object, ...], float] = {}
        zero = ConstantLoss(0.0)
        self.references = bench.references() if bench is not None else None
        self.losses: dict[str, PathLoss] = {
            c: (bench.loss(c) if bench is not None else zero) for c in ("if", "rf_port", "lo_port")
        }
        lo_h = tuple(self.harmonics["lo"][0])
        #: Each RF source's source-harmonic routes (:mod:`sweeprig.plan.harmonic_routes`).
        self.routes = {label: hr.tone_routes(tuple(self.harmonics[label][0]), lo_h,
                                             self.gain_db, self._even_conversion_db())
                       for label in ("rf", "rf2")}

    # -- port pictures --------------------------------------------------------------------

    def port_signals(self, port: str, d: Drive, rf_freq_hz: float | None = None
                     ) -> list[tuple[float, float]]:
        """Predicted (frequency, level at the analyzer input) of the strong signals at ``port``.

        ``rf_freq_hz`` overrides the RF tone 1 frequency (image reading).
        """
        f_rf = d.rf_freq_hz if rf_freq_hz is None else rf_freq_hz
        tones = [(f_rf, d.rf_power_dbm)]
        if d.rf2_freq_hz is not None and d.rf2_power_dbm is not None:
            tones.append((d.rf2_freq_hz, d.rf2_power_dbm))
        out: list[tuple[float, float]] = []
        if port == "if":
            loss = self.losses["if"]
            for f, p in tones:
                f_out = float(fp.wanted_output_hz(f, d.lo_freq_hz, self.conversion, self.lo_side))
                out.append((f_out, p + self.gain_db - loss.at(f_out)))
                out.append((f, p - (self.iso_rf_if or 0.0) - loss.at(f)))
            out.append((d.lo_freq_hz, d.lo_power_dbm - (self.iso_lo_if or 0.0)
                         - loss.at(d.lo_freq_hz)))
        elif port == "rf":
            loss = self.losses["rf_port"]
            for f, p in tones:
                out.append((f, p - loss.at(f)))
            out.append((d.lo_freq_hz, d.lo_power_dbm - (self.iso_lo_rf or 0.0)
                         - loss.at(d.lo_freq_hz)))
        else:
            loss = self.losses["lo_port"]
            out.append((d.lo_freq_hz, d.lo_power_dbm - loss.at(d.lo_freq_hz)))
            for f, p in tones:
                out.append((f, p - loss.at(f)))
        return out

    # -- readings -------------------------------------------------------------------------

    def readings(self, study: Study, d: Drive) -> tuple[Reading, ...]:
        """All readings of ``study`` at drive ``d``, in the order the study lists them."""
        out: list[Reading] = []
        self._picture: dict[tuple[str, float | None], _PortPicture] = {}
        self._drive = d
        m, n = fp.wanted_orders(self.conversion, self.lo_side)
        wanted_hz = float(fp.wanted_output_hz(d.rf_freq_hz, d.lo_freq_hz, self.conversion,
                                              self.lo_side))
        if_loss = self.losses["if"]
        wanted_dbm = d.rf_power_dbm + self.gain_db - if_loss.at(wanted_hz)
        two = d.rf2_freq_hz is not None
        for spec in study.readings():
            base = spec.name or spec.kind
            settings = self._settings(study.analyzer, spec.analyzer)
            check = spec.attenuation_check if spec.attenuation_check is not None else \
                study.attenuation_check  # None: automatic, from the predicted margin
            if spec.kind not in DISTORTION_KINDS:
                check = False
            items: list[tuple[str, str, float, tuple[int, ...], float | None, float | None]] = []
            # (name, port, freq, orders, expected_dbm, rf_retune)
            kind = spec.kind
            if kind == "wanted":
                items.append((base, "if", wanted_hz, (m, n) + ((0,) if two else ()),
                              wanted_dbm, None))
                if two:
                    assert d.rf2_freq_hz is not None and d.rf2_power_dbm is not None
                    f2 = float(fp.wanted_output_hz(d.rf2_freq_hz, d.lo_freq_hz, self.conversion,
                                                   self.lo_side))
                    items.append((f"{base}.tone2", "if", f2, (m, 0, n),
                                  d.rf2_power_dbm + self.gain_db - if_loss.at(f2), None))
            elif kind == "lo_at_if":
                exp = None if self.iso_lo_if is None else \
                    d.lo_power_dbm - self.iso_lo_if - if_loss.at(d.lo_freq_hz)
                items.append((base, "if", d.lo_freq_hz, (1, 0), exp, None))
            elif kind == "lo_at_rf":
                loss = self.losses["rf_port"]
                exp = None if self.iso_lo_rf is None else \
                    d.lo_power_dbm - self.iso_lo_rf - loss.at(d.lo_freq_hz)
                items.append((base, "rf", d.lo_freq_hz, (1, 0), exp, None))
            elif kind == "rf_at_if":
                exp = None if self.iso_rf_if is None else \
                    d.rf_power_dbm - self.iso_rf_if - if_loss.at(d.rf_freq_hz)
                items.append((base, "if", d.rf_freq_hz, (0, 1), exp, None))
            elif kind == "image":
                f_img = float(fp.image_hz(d.rf_freq_hz, d.lo_freq_hz))
                items.append((base, "if", wanted_hz, (1, -1), None, f_img))
            elif kind == "sideband":
                f_other, other = fp.other_sideband(d.rf_freq_hz, d.lo_freq_hz, self.conversion,
                                                   self.lo_side)
                # a double-balanced mixer converts to both sidebands alike (common practice,
                # no source): the unwanted one is expected as strong as the wanted
                items.append((base, "if", f_other, other, wanted_dbm - if_loss.at(f_other)
                              + if_loss.at(wanted_hz), None))
            elif kind == "mxn":
                order = spec.order or 3
                lo_f = max(spec.min_frequency or 0.0, LOWEST_PRODUCT_HZ)
                hi_f = spec.max_frequency if spec.max_frequency is not None else math.inf
                for prod in fp.mxn_products(d.lo_freq_hz, d.rf_freq_hz, order):
                    if not lo_f <= prod.freq_hz <= hi_f:
                        continue
                    exp = None
                    if (prod.m, prod.n) == (m, n):
                        exp = wanted_dbm
                    elif (prod.m, prod.n) == (1, 0) and self.iso_lo_if is not None:
                        exp = d.lo_power_dbm - self.iso_lo_if - if_loss.at(prod.freq_hz)
                    elif (prod.m, prod.n) == (0, 1) and self.iso_rf_if is not None:
                        exp = d.rf_power_dbm - self.iso_rf_if - if_loss.at(prod.freq_hz)
                    items.append((f"{base}.{prod.label}", "if", prod.freq_hz,
                                  (prod.m, prod.n), exp, None))
            elif kind in ("im3", "im2"):
                assert d.rf2_freq_hz is not None
                out_hz = fp.two_tone_output_hz(d.rf_freq_hz, d.rf2_freq_hz, d.lo_freq_hz,
                                               self.conversion, self.lo_side)
                tt = fp.TwoToneProducts
                if kind == "im3":
                    items.append((f"{base}.lower", "if", out_hz["im3_lower"],
                                  fp.translated_orders(tt.IM3_LOWER, self.conversion,
                                                       self.lo_side), None, None))
                    items.append((f"{base}.upper", "if", out_hz["im3_upper"],
                                  fp.translated_orders(tt.IM3_UPPER, self.conversion,
                                                       self.lo_side), None, None))
                else:
                    items.append((f"{base}.diff", "if", out_hz["im2_diff"], (0, *tt.IM2_DIFF),
                                  None, None))
                    items.append((f"{base}.sum", "if", out_hz["im2_sum"], (0, *tt.IM2_SUM),
                                  None, None))
            elif kind == "supply_current":
                out.append(Reading(name=base, kind=kind, instrument="dc"))
                continue
            elif kind == "noise_figure":  # hot/cold noise at the IF: sweeprig.engine.noise_figure
                plan = self._noise_plan(d, wanted_hz, settings)
                out.append(Reading(name=base, kind=kind, instrument="noise", port="if",
                                   freq_hz=wanted_hz, orders=(m, n), noise=plan.settings,
                                   risks=plan.risks, predicted=plan.prediction()))
                continue
            elif kind == "input_power":
                out.append(Reading(name=base, kind=kind, instrument="pm", freq_hz=d.rf_freq_hz,
                                   expected_dbm=power_sum_dbm(
                                       [d.rf_power_dbm] + ([d.rf2_power_dbm] if two and
                                                           d.rf2_power_dbm is not None else []))))
                continue
            for name, port, freq, orders, exp, retune in items:
                siblings = [f for _, p, f, _, _, _ in items if p == port]
                bound = None if self.references is None else sw.offset_bound_hz(
                    orders, d.lo_freq_hz, d.rf_freq_hz if retune is None else retune,
                    d.rf2_freq_hz, self.references)
                setup, pred = self._setup(kind, port, d, freq, exp, wanted_dbm, settings,
                                          retune, 0.0, siblings, orders=orders,
                                          bound_hz=bound)
                known = self._known_hz(port, retune, freq, siblings)
                search = None if bound is None else sw.search_half_width_hz(
                    bound, setup.rbw_hz, self._nearest_hz(port, d, retune, freq, siblings))
                out.append(Reading(name=name, kind=kind, instrument="sa", port=port,
                                   freq_hz=freq, orders=orders, analyzer=setup,
                                   rf_retune_hz=retune, expected_dbm=exp, known_hz=known,
                                   risks=pred.risks, predicted=pred, search_hz=search,
                                   offset_bound_hz=bound))
                repeat = check if check is not None else \
                    "analyzer_distortion" in pred.risks
                if repeat:
                    extra, pred10 = self._setup(kind, port, d, freq, exp, wanted_dbm,
                                                settings, retune, ATTENUATION_CHECK_DB,
                                                siblings, base_att=setup.attenuation_db,
                                                orders=orders, bound_hz=bound)
                    out.append(Reading(name=f"{name}.att10", kind=kind, instrument="sa",
                                       port=port, freq_hz=freq, orders=orders, analyzer=extra,
                                       rf_retune_hz=retune, attenuation_check=True,
                                       repeat_of=name, expected_dbm=exp, known_hz=known,
                                       risks=pred10.risks, predicted=pred10,
                                       search_hz=None if bound is None else
                                       sw.search_half_width_hz(bound, extra.rbw_hz,
                                                               self._nearest_hz(
                                                                   port, d, retune, freq,
                                                                   siblings)),
                                       offset_bound_hz=bound))
        return tuple(out)

    def _settings(self, study_layer: AnalyzerSettings | None,
                  reading_layer: AnalyzerSettings | None) -> AnalyzerSettings:
        """A reading's merged analyzer settings (:func:`_merge` of the sequence's, the
        study's and the reading's), merged once per pair of layers: the study's reading
        tables are kept (:meth:`~sweeprig.formats.sequence.Study.readings`), so every point
        asks with the very same objects (kept here with the result, so an id is never
        another object's)."""
        key = (id(study_layer), id(reading_layer))
        kept = self._merged.get(key)
        if kept is not None and kept[0] is study_layer and kept[1] is reading_layer:
            return kept[2]
        merged = _merge(self.defaults, study_layer, reading_layer)
        self._merged[key] = (study_layer, reading_layer, merged)
        return merged

    def _nearest_hz(self, port: str, d: Drive, retune_hz: float | None, freq_hz: float,
                    siblings_hz: list[float]) -> float:
        """Distance to the nearest other known line at ``port``, Hz (inf: none)."""
        pic = self._port(port, d, retune_hz)
        return min((abs(f - freq_hz) for f in [*pic.neighbours_hz, *siblings_hz]
                    if abs(f - freq_hz) >= 1.0), default=math.inf)

    def _known_hz(self, port: str, retune_hz: float | None, freq_hz: float,
                  siblings_hz: list[float]) -> tuple[float, ...]:
        """Other lines expected at ``port`` (the port picture of :meth:`_setup`, plus the
        other products of the same reading kind), without ``freq_hz`` itself, sorted."""
        neighbours = self._port(port, self._drive, retune_hz).neighbours_hz
        lines = {float(f) for f in [*neighbours, *siblings_hz] if math.isfinite(f)}
        return tuple(sorted(f for f in lines if abs(f - freq_hz) >= 1.0))

    def _port(self, port: str, d: Drive, retune_hz: float | None) -> _PortPicture:
        """The strong lines at ``port`` for this drive (cached per reading batch)."""
        key = (port, retune_hz)
        picture = self._picture.get(key)
        if picture is not None:
            return picture
        signals = self.port_signals(port, d, retune_hz)
        lines = [mg.Line(f, p, "line") for f, p in signals]
        neighbours = [f for f, _ in signals]
        if port == "if":
            lines += self._other_sideband(d, retune_hz)
            neighbours += [ln.freq_hz for ln in lines[len(signals):]]
        if d.rf2_freq_hz is not None and port == "if":
            neighbours += list(fp.two_tone_output_hz(
                d.rf_freq_hz, d.rf2_freq_hz, d.lo_freq_hz, self.conversion,
                self.lo_side).values())
        picture = _PortPicture(
            lines=tuple(lines), neighbours_hz=tuple(neighbours),
            total_dbm=power_sum_dbm([ln.level_dbm for ln in lines]),
            distortion=mg.distortion_table(lines, self.specs),
            harmonics=self._harmonic_lines(port, d, retune_hz))
        self._picture[key] = picture
        return picture

    def _other_sideband(self, d: Drive, retune_hz: float | None) -> list[mg.Line]:
        """The part's other sideband at the IF port (e.g. the sum frequency of a
        downconverter), as strong as the wanted output (a double-balanced mixer converts to
        both sidebands alike; common practice, no source)."""
        f_rf = d.rf_freq_hz if retune_hz is None else retune_hz
        tones = [(f_rf, d.rf_power_dbm)]
        if d.rf2_freq_hz is not None and d.rf2_power_dbm is not None:
            tones.append((d.rf2_freq_hz, d.rf2_power_dbm))
        loss = self.losses["if"]
        out = []
        for f, p in tones:
            wanted = float(fp.wanted_output_hz(f, d.lo_freq_hz, self.conversion, self.lo_side))
            other = f + d.lo_freq_hz if abs(wanted - (f + d.lo_freq_hz)) > 1.0 else \
                abs(f - d.lo_freq_hz)
            if other > 0:
                out.append(mg.Line(other, p + self.gain_db - loss.estimate_at(other),
                                   "other sideband"))
        return out

    def _harmonic_tones(self, d: Drive, retune_hz: float | None) -> list[mg.HarmonicTone]:
        """The RF tones at the part with their sources' stated harmonics."""
        f_rf = d.rf_freq_hz if retune_hz is None else retune_hz
        tones = [mg.HarmonicTone(f_rf, d.rf_power_dbm, tuple(self.harmonics["rf"][0]), "rf")]
        if d.rf2_freq_hz is not None and d.rf2_power_dbm is not None:
            tones.append(mg.HarmonicTone(d.rf2_freq_hz, d.rf2_power_dbm,
                                         tuple(self.harmonics["rf2"][0]), "rf2"))
        return tones

    def _even_conversion_db(self) -> float:
        """The part's conversion through an even LO order with a clean LO: as strong as its
        stated RF→IF feedthrough; unknown isolation: the wanted gain or none, the larger
        (the safe side; :func:`sweeprig.plan.margins.lo_order_conversion_db`)."""
        if self.iso_rf_if is not None:
            return -self.iso_rf_if
        return max(self.gain_db, 0.0)

    def _harmonic_lines(self, port: str, d: Drive, retune_hz: float | None
                        ) -> tuple[FloatArray, FloatArray]:
        """(frequency, level at the analyzer input) of the lines the sources' harmonics put at
        ``port``, Hz and dBm. At the IF port every route of
        :func:`sweeprig.plan.margins.source_harmonic_lines` (an RF harmonic through any LO
        order, an even LO harmonic acting as an LO, a harmonic with its fundamental in the
        input stage; from the planner's route tables, :mod:`sweeprig.plan.harmonic_routes`)
        and an LO harmonic leaking at the LO→IF isolation; at the RF and LO ports the
        harmonics as they arrive (an LO harmonic at the LO→RF isolation). Unknown isolation:
        none (the safe side)."""
        tones = self._harmonic_tones(d, retune_hz)
        conn = {"if": "if", "rf": "rf_port", "lo": "lo_port"}[port]
        lo_h, _ = self.harmonics["lo"]
        iso = {"if": self.iso_lo_if, "rf": self.iso_lo_rf, "lo": 0.0}[port] or 0.0
        freqs = [np.arange(2, len(lo_h) + 2) * d.lo_freq_hz]
        levels = [np.array([d.lo_power_dbm + h - iso for h in lo_h], dtype=float)]
        if port == "if":
            f, lv = hr.source_harmonic_arrays([self.routes[t.label] for t in tones],
                                              d.lo_freq_hz, tones)
            freqs.append(f)
            levels.append(lv)
        else:
            for tone in tones:
                freqs.append(np.arange(2, len(tone.harmonics_dbc) + 2) * tone.freq_hz)
                levels.append(np.array([tone.power_dbm + h for h in tone.harmonics_dbc],
                                       dtype=float))
        freq, level = np.concatenate(freqs), np.concatenate(levels)
        keep = (freq > 0) & np.isfinite(level)
        freq, level = freq[keep], level[keep]
        return freq, level - hr.estimate_losses_db(self.losses[conn], freq)

    def _relative_harmonic_dbc(self, port: str, d: Drive, retune_hz: float | None,
                               orders: tuple[int, ...] | None) -> float:
        """Source-harmonic contributions that scale the part's own line of ``orders`` at the
        IF port, dBc of that line (:func:`sweeprig.plan.margins.source_harmonic_relative_dbc`);
        −inf for other ports, leakage lines (no RF order) and unknown orders."""
        if port != "if" or orders is None or not any(orders[1:]):
            return -math.inf
        # it reads the orders and the tones' powers only (not their frequencies), so it is
        # worked out once per orders and powers, not at every point of a frequency sweep
        two = d.rf2_freq_hz is not None and d.rf2_power_dbm is not None
        key = (abs(orders[0]), orders[1:], d.rf_power_dbm, d.rf2_power_dbm if two else None)
        kept = self._relative_dbc.get(key)
        if kept is None:
            kept = mg.source_harmonic_relative_dbc(
                abs(orders[0]), orders[1:], tuple(self.harmonics["lo"][0]),
                self._harmonic_tones(d, retune_hz))
            self._relative_dbc[key] = kept
        return kept

    def _reference_dbm(self, kind: str, port: str, d: Drive, wanted_dbm: float) -> float:
        """Level that ``spur_floor`` counts down from, for a product of unknown level.

        LO leakage: the LO as it would arrive with no isolation; RF feedthrough: the RF
        likewise; everything else: the wanted output.
        """
        conn = {"if": "if", "rf": "rf_port", "lo": "lo_port"}[port]
        if kind in ("lo_at_if", "lo_at_rf"):
            return d.lo_power_dbm - self.losses[conn].at(d.lo_freq_hz)
        if kind == "rf_at_if":
            return d.rf_power_dbm - self.losses[conn].at(d.rf_freq_hz)
        return wanted_dbm

    def _setup(self, kind: str, port: str, d: Drive, freq_hz: float,
               expected_dbm: float | None, wanted_dbm: float, s: AnalyzerSettings,
               retune_hz: float | None, extra_att_db: float, siblings_hz: list[float],
               base_att: float | None = None, orders: tuple[int, ...] | None = None,
               bound_hz: float | None = None) -> tuple[AnalyzerSetup, mg.Prediction]:
        """Settings of one reading and what is predicted at them (module docstring).

        ``base_att``: for the attenuation-check repeat, the attenuation of the reading it
        repeats (the repeat adds ``extra_att_db`` to it). ``orders``: the product's (LO, RF…)
        orders, for the source-harmonic contributions that scale the part's own line.
        ``bound_hz``: the product's offset the references explain (None: no ``[timebase]``).
        """
        pic = self._port(port, d, retune_hz)
        total = pic.total_dbm
        defaults = self.defaults
        spec = self.specs
        nearest = min((abs(f - freq_hz) for f in [*pic.neighbours_hz, *siblings_hz]
                       if abs(f - freq_hz) >= 1.0), default=math.inf)
        known_level = expected_dbm is not None and math.isfinite(expected_dbm)
        if known_level:
            assert expected_dbm is not None
            product = expected_dbm
        else:
            product = self._reference_dbm(kind, port, d, wanted_dbm) - defaults.spur_floor
        loss_db = self.losses["if"].at(freq_hz) if port == "if" else 0.0
        # noise per hertz of RBW, dBm: analyzer (without attenuation), part, reciprocal
        part_1hz = mg.part_noise_dbm(self.part_nf_db, self.gain_db, loss_db, 1.0) \
            if port == "if" else -math.inf
        recip_1hz = mg.reciprocal_dbm(pic.lines, freq_hz, 1.0, spec.phase_noise)
        # products within the reach of the widest RBW; each setting keeps those within
        # LANDS_RBW of its own RBW (a product that close reads as part of the marker level)
        reach = LANDS_RBW * RBW_STEPS_HZ[-1]
        off = np.abs(pic.distortion.freq_hz - freq_hz)
        near = off <= reach
        d_off, d_level0, d_order = off[near], pic.distortion.level0_dbm[near], \
            pic.distortion.order[near]
        h_off = np.abs(pic.harmonics[0] - freq_hz)
        h_near = h_off <= reach
        harm = list(zip(h_off[h_near].tolist(), pic.harmonics[1][h_near].tolist(), strict=True))
        relative = self._relative_harmonic_dbc(port, d, retune_hz, orders)
        if math.isfinite(relative):  # on the product itself, whatever the RBW
            harm.append((0.0, product + relative))

        # the attenuation search and the final setting ask the same questions again: each
        # answer is worked out once per call (the same operations, so the same numbers)
        distortion_seen: dict[tuple[float, float], float] = {}
        rbw_seen: dict[float, float] = {}
        fastest: list[float] = []

        def distortion_at(att: float, rbw: float) -> float:
            seen = distortion_seen.get((att, rbw))
            if seen is not None:
                return seen
            if not d_level0.size:
                value = -math.inf
            else:
                hit = d_off <= max(LANDS_RBW * rbw, mg.SAME_LINE_HZ)
                value = float(power_sum_dbm(list(d_level0[hit] - (d_order[hit] - 1.0) * att))) \
                    if hit.any() else -math.inf
            distortion_seen[(att, rbw)] = value
            return value

        def harmonic_at(rbw: float) -> float:
            return power_sum_dbm([lv for o, lv in harm
                                  if o <= max(LANDS_RBW * rbw, mg.SAME_LINE_HZ)])

        def choose_rbw(att: float) -> float:
            if isinstance(s.rbw, float):
                return s.rbw
            seen = rbw_seen.get(att)
            if seen is not None:
                return seen
            need = product - defaults.noise_margin
            n_1hz = power_sum_dbm([mg.KT0_DBM_PER_HZ + spec.noise_figure_db + att,
                                   part_1hz, recip_1hz])
            rbw_max = 10.0 ** (min(need - n_1hz, 300.0) / 10.0)
            rbw_max = min(rbw_max, nearest / 10.0)
            if not fastest:  # the same for every attenuation
                fastest.append(self._fastest_rbw(s, nearest))
            rbw = fastest[0]
            for step in RBW_STEPS_HZ:
                if rbw <= step <= rbw_max:
                    rbw = step
            rbw_seen[att] = rbw
            return rbw

        def shortfall(att: float) -> tuple[float, float]:
            """(distortion and compression shortfall, noise shortfall), dB (0: none)."""
            mixer = total - att
            comp = mg.compression_db(mixer, spec.p1db_dbm)
            bad_comp = comp > mg.COMPRESSION_RISK_DB or mixer > spec.overload_dbm
            rbw = choose_rbw(att)
            dist = distortion_at(att, rbw)
            short_d = max(dist - (product - defaults.distortion_margin), 0.0)
            noise = power_sum_dbm([mg.danl_dbm(spec.noise_figure_db, att, rbw),
                                   part_1hz + 10.0 * math.log10(rbw)])
            short_n = max(noise - (product - defaults.noise_margin), 0.0)
            return short_d + (1e3 if bad_comp else 0.0), short_n

        rule_att = 2.0 * math.ceil(max(total - defaults.mixer_level, 0.0) / 2.0)
        if base_att is not None:
            att = min(base_att + extra_att_db, MAX_ATTENUATION_DB)
        elif isinstance(s.attenuation, float):
            att = min(s.attenuation + extra_att_db, MAX_ATTENUATION_DB)
        else:
            att = min(rule_att, MAX_ATTENUATION_DB)
            best = (math.inf, att)
            candidate = att
            while candidate <= MAX_ATTENUATION_DB:
                short_d, short_n = shortfall(candidate)
                if short_d == 0.0 and short_n == 0.0:
                    best = (0.0, candidate)
                    break
                worst = max(short_d, short_n)
                if worst < best[0]:
                    best = (worst, candidate)
                if short_d == 0.0:  # more attenuation only raises the noise from here
                    break
                candidate += 2.0
            att = min(best[1] + extra_att_db, MAX_ATTENUATION_DB)
        rbw = choose_rbw(att)
        if isinstance(s.reference_level, float):
            ref = s.reference_level
        else:
            ref = 5.0 * math.ceil((total + 3.0) / 5.0)
        # with a [timebase] this stays the narrow span of an aimed search; the engine widens
        # it to the whole window only while it cannot yet tell where the product lies
        span = s.span if isinstance(s.span, float) else min(20.0 * rbw, nearest)
        averages = s.averages if isinstance(s.averages, int) else 1
        setup = AnalyzerSetup(center_hz=freq_hz, span_hz=span, rbw_hz=rbw, attenuation_db=att,
                              reference_level_dbm=ref, averages=averages)
        return setup, self._predict(pic, freq_hz, product, known_level, setup, part_1hz,
                                    recip_1hz, distortion_at(att, rbw), harmonic_at(rbw),
                                    siblings_hz)

    def _noise_plan(self, d: Drive, if_hz: float, s: AnalyzerSettings) -> NoisePlan:
        """A noise-figure reading's settings: explicit RBW, averages and attenuation kept,
        the attenuation otherwise chosen
        (:func:`sweeprig.plan.noise_setup.plan_noise_attenuation`)."""
        base = NoiseSettings()
        settings = NoiseSettings(
            rbw_hz=s.rbw if isinstance(s.rbw, float) else base.rbw_hz,
            averages=s.averages if isinstance(s.averages, int) else base.averages)
        table = self.bench.enr_table if self.bench is not None else None
        image_hz = abs(2.0 * d.lo_freq_hz - d.rf_freq_hz)
        enr_db = float(max(table.enr_at([d.rf_freq_hz, image_hz]))) if table is not None \
            else DEFAULT_ENR_DB
        loss = self.losses["if"]
        lo_leak = d.lo_power_dbm - (self.iso_lo_if or 0.0) - loss.at(d.lo_freq_hz)
        return plan_noise_attenuation(
            settings, self.specs, part_nf_db=self.part_nf_db, gain_db=self.gain_db,
            loss_db=loss.at(if_hz), enr_db=enr_db, lo_leak_dbm=lo_leak,
            attenuation_db=s.attenuation if isinstance(s.attenuation, float) else None,
            assumed=" ".join(
                ([f"part noise figure assumed {self.part_nf_db:g} dB (state "
                  "part.expected_noise_figure)."] if self.part_nf_assumed else [])
                + (["LO-IF isolation not stated: 0 dB assumed, the LO at full level at the "
                    "analyzer (state part.expected_lo_if_isolation)."]
                   if self.iso_lo_if is None else [])))

    def _fastest_rbw(self, s: AnalyzerSettings, nearest_hz: float) -> float:
        """The narrowest RBW step whose sweep fits ``max_sweep_time`` (auto span)."""
        budget = self.defaults.max_sweep_time
        averages = s.averages if isinstance(s.averages, int) else 1
        for step in RBW_STEPS_HZ:
            span = s.span if isinstance(s.span, float) else min(20.0 * step, nearest_hz)
            if max(SWEEP_TIME_K * span / step**2, MIN_SWEEP_TIME_S) * averages <= budget:
                return step
        return RBW_STEPS_HZ[-1]

    def _predict(self, pic: _PortPicture, freq_hz: float, product: float, known_level: bool,
                 setup: AnalyzerSetup, part_1hz: float, recip_1hz: float, dist: float,
                 source_harmonic: float, siblings_hz: list[float]) -> mg.Prediction:
        spec = self.specs
        margins = self.defaults
        att, rbw = setup.attenuation_db, setup.rbw_hz
        mixer = pic.total_dbm - att
        comp = mg.compression_db(mixer, spec.p1db_dbm)
        noise = power_sum_dbm([mg.danl_dbm(spec.noise_figure_db, att, rbw),
                               part_1hz + 10.0 * math.log10(rbw)])
        recip = recip_1hz + 10.0 * math.log10(rbw)
        risks: list[str] = []
        reasons: list[str] = []
        what = "the product" if known_level else \
            f"the weakest level this reading is set to see ({product:.1f} dBm)"

        def below(level: float) -> str:
            gap = product - level
            return f"{abs(gap):.1f} dB {'below' if gap >= 0 else 'above'} {what}"
        if comp > mg.COMPRESSION_RISK_DB or mixer > spec.overload_dbm:
            risks.append("analyzer_compression")
            reasons.append(f"first mixer at {mixer:.1f} dBm compresses {comp:.2f} dB "
                           f"(overload {spec.overload_dbm:g} dBm)")
        if dist > product - margins.distortion_margin:
            risks.append("analyzer_distortion")
            reasons.append(f"analyzer's own products {dist:.1f} dBm, {below(dist)} "
                           f"(margin {margins.distortion_margin:g} dB)")
        if source_harmonic > product - margins.distortion_margin:
            risks.append("source_harmonic")
            reasons.append(f"source harmonics land at {source_harmonic:.1f} dBm, "
                           f"{below(source_harmonic)} (margin {margins.distortion_margin:g} dB)")
        if recip > product - margins.noise_margin:
            risks.append("reciprocal_mixing")
            reasons.append(f"reciprocal mixing {recip:.1f} dBm, {below(recip)} "
                           f"(margin {margins.noise_margin:g} dB)")
        if noise > product - margins.noise_margin:
            risks.append("noise")
            reasons.append(f"noise {noise:.1f} dBm in {rbw:g} Hz RBW, {below(noise)} "
                           f"(margin {margins.noise_margin:g} dB)")
        others = [*pic.lines, *(mg.Line(f, product, "sibling") for f in siblings_hz)]
        if mg.merged(others, freq_hz, product, rbw, setup.span_hz, margins.noise_margin):
            risks.append("rbw_merged")
            reasons.append(f"another line within the {rbw:g} Hz RBW's reach")
        if pic.total_dbm > setup.reference_level_dbm:  # a reference level set by hand
            risks.append("above_reference")
            reasons.append(f"{pic.total_dbm:.1f} dBm at the analyzer input, above the "
                           f"reference level of {setup.reference_level_dbm:g} dBm")
        order = sorted(range(len(risks)), key=lambda i: risks[i])
        return mg.Prediction(
            product_dbm=product if known_level else None, noise_dbm=noise,
            analyzer_distortion_dbm=dist if math.isfinite(dist) else None,
            source_harmonic_dbm=source_harmonic if math.isfinite(source_harmonic) else None,
            reciprocal_dbm=recip if math.isfinite(recip) else None,
            mixer_level_dbm=mixer, compression_db=comp,
            risks=tuple(risks[i] for i in order), reasons=tuple(reasons[i] for i in order),
            target_dbm=None if known_level else product)


@dataclass(frozen=True)
class _PortPicture:
    """The strong lines at one port for one drive, and what follows from them."""

    lines: tuple[mg.Line, ...]
    neighbours_hz: tuple[float, ...]
    total_dbm: float
    distortion: mg.DistortionTable
    harmonics: tuple[FloatArray, FloatArray]
    """(frequency, level) of the sources' harmonic lines, Hz and dBm."""


def _merge(*layers: AnalyzerSettings | None) -> AnalyzerSettings:
    """Later layers win; a field left out (None) inherits; ``"auto"`` stays auto."""
    values: dict[str, object] = {}
    for layer in layers:
        if layer is None:
            continue
        for key in AnalyzerSettings.model_fields:
            v = getattr(layer, key)
            if v is not None:
                values[key] = v
    return AnalyzerSettings.model_construct(**{k: values.get(k, AUTO)
                                               for k in AnalyzerSettings.model_fields})
