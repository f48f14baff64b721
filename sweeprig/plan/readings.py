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
* averages: 1.

The analyzer-distortion check repeats a reading with 10 dB more input attenuation: a product
made by the DUT keeps its displayed level, one made in the analyzer's first mixer drops
(common practice, no single source).

Predicted levels use the part's expected gain and isolations; an unknown isolation counts as
0 dB (the safe side: the full LO or RF power is assumed to arrive at the analyzer).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from sweeprig.formats.bench import Bench
from sweeprig.formats.pathloss import ConstantLoss, PathLoss
from sweeprig.formats.sequence import AUTO, DISTORTION_KINDS, AnalyzerSettings, Sequence, Study
from sweeprig.plan import frequencies as fp

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
    ``instrument``: "sa", "pm" or "dc". ``port``: DUT port the analyzer reads ("if", "rf",
    "lo"), None for pm/dc. ``freq_hz``: product frequency (for pm: the RF frequency, for the
    sensor's calibration factor). ``orders``: multipliers of (LO, RF1[, RF2]) whose
    |Σ orders·f| is ``freq_hz``. ``rf_retune_hz``: set the RF source here for this reading
    only (image response), then back. ``attenuation_check``: this is the +10 dB repeat of
    ``repeat_of``. ``expected_dbm``: predicted level at the analyzer input, None if unknown.
    ``known_hz``: the other lines the plan expects at this port (tones, leakage, the other
    products of the reading's kind), which the noise-floor estimate masks out of the trace.
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
        self.defaults = sequence.analyzer
        zero = ConstantLoss(0.0)
        self.losses: dict[str, PathLoss] = {
            c: (bench.loss(c) if bench is not None else zero) for c in ("if", "rf_port", "lo_port")
        }

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
        self._picture: dict[tuple[str, float | None], tuple[float, list[float]]] = {}
        m, n = fp.wanted_orders(self.conversion, self.lo_side)
        wanted_hz = float(fp.wanted_output_hz(d.rf_freq_hz, d.lo_freq_hz, self.conversion,
                                              self.lo_side))
        if_loss = self.losses["if"]
        wanted_dbm = d.rf_power_dbm + self.gain_db - if_loss.at(wanted_hz)
        two = d.rf2_freq_hz is not None
        for spec in study.readings():
            base = spec.name or spec.kind
            settings = _merge(self.defaults, study.analyzer, spec.analyzer)
            check = spec.attenuation_check if spec.attenuation_check is not None else \
                study.attenuation_check
            check = bool(check) and spec.kind in DISTORTION_KINDS
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
            elif kind == "input_power":
                out.append(Reading(name=base, kind=kind, instrument="pm", freq_hz=d.rf_freq_hz,
                                   expected_dbm=power_sum_dbm(
                                       [d.rf_power_dbm] + ([d.rf2_power_dbm] if two and
                                                           d.rf2_power_dbm is not None else []))))
                continue
            for name, port, freq, orders, exp, retune in items:
                setup = self._setup(kind, port, d, freq, exp, wanted_dbm, settings, retune, 0.0)
                known = self._known_hz(port, retune, freq,
                                       [f for _, p, f, _, _, _ in items if p == port])
                out.append(Reading(name=name, kind=kind, instrument="sa", port=port,
                                   freq_hz=freq, orders=orders, analyzer=setup,
                                   rf_retune_hz=retune, expected_dbm=exp, known_hz=known))
                if check:
                    extra = self._setup(kind, port, d, freq, exp, wanted_dbm, settings, retune,
                                        ATTENUATION_CHECK_DB)
                    out.append(Reading(name=f"{name}.att10", kind=kind, instrument="sa",
                                       port=port, freq_hz=freq, orders=orders, analyzer=extra,
                                       rf_retune_hz=retune, attenuation_check=True,
                                       repeat_of=name, expected_dbm=exp, known_hz=known))
        return tuple(out)

    def _known_hz(self, port: str, retune_hz: float | None, freq_hz: float,
                  siblings_hz: list[float]) -> tuple[float, ...]:
        """Other lines expected at ``port`` (the port picture of :meth:`_setup`, plus the
        other products of the same reading kind), without ``freq_hz`` itself, sorted."""
        _, neighbours = self._picture[(port, retune_hz)]
        lines = {float(f) for f in [*neighbours, *siblings_hz] if math.isfinite(f)}
        return tuple(sorted(f for f in lines if abs(f - freq_hz) >= 1.0))

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
               retune_hz: float | None, extra_att_db: float) -> AnalyzerSetup:
        key = (port, retune_hz)
        if key not in self._picture:
            signals = self.port_signals(port, d, retune_hz)
            neighbours = [f for f, _ in signals]
            if d.rf2_freq_hz is not None and port == "if":
                neighbours += list(fp.two_tone_output_hz(
                    d.rf_freq_hz, d.rf2_freq_hz, d.lo_freq_hz, self.conversion,
                    self.lo_side).values())
            self._picture[key] = (power_sum_dbm([p for _, p in signals]), neighbours)
        total, neighbours = self._picture[key]
        mixer_level = self.defaults.mixer_level
        if isinstance(s.attenuation, float):
            att = s.attenuation
        else:
            att = 2.0 * math.ceil(max(total - mixer_level, 0.0) / 2.0)
        att = min(att + extra_att_db, MAX_ATTENUATION_DB)
        if isinstance(s.reference_level, float):
            ref = s.reference_level
        else:
            ref = 5.0 * math.ceil((total + 3.0) / 5.0)
        nearest = min((abs(f - freq_hz) for f in neighbours if abs(f - freq_hz) >= 1.0),
                      default=math.inf)
        if isinstance(s.rbw, float):
            rbw = s.rbw
        else:
            if expected_dbm is not None:
                target = expected_dbm
            else:
                target = self._reference_dbm(kind, port, d, wanted_dbm) - self.defaults.spur_floor
            danl_needed = target - self.defaults.noise_margin
            # capped at 300 dB(Hz): far above any RBW, and no overflow for absurd levels
            rbw_max = 10.0 ** (min(danl_needed + 174.0 - self.nf_db - att, 300.0) / 10.0)
            rbw_max = min(rbw_max, nearest / 10.0)
            rbw = RBW_STEPS_HZ[0]
            for step in RBW_STEPS_HZ:
                if step <= rbw_max:
                    rbw = step
        span = s.span if isinstance(s.span, float) else min(20.0 * rbw, nearest)
        averages = s.averages if isinstance(s.averages, int) else 1
        return AnalyzerSetup(center_hz=freq_hz, span_hz=span, rbw_hz=rbw, attenuation_db=att,
                             reference_level_dbm=ref, averages=averages)


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
