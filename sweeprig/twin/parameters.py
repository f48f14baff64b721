"""Which part parameters a twin fit may move, within which bounds, and what constrains each.

Each :class:`FitParameter` names its part-file key, reads and writes the SI value on a
:class:`~sweeprig.sim.mixer.part.MixerPart`, is fitted in linear or log10 space (log for
currents, resistances and corner frequencies, which span decades), carries hard bounds
(physically sensible ranges for an active Gilbert-cell mixer; common practice, no source)
and decides from the observations whether the data constrain it. A parameter the data do
not constrain keeps the template's value, and the part file says so.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace

from sweeprig.sim.mixer.part import MixerPart, PortNetwork
from sweeprig.twin.observations import ObservationSet

#: Two RF frequencies this far apart (ratio) or more let the gain's slope speak for the
#: RF port's band corners (common practice, no source: closer, a first-order corner a
#: decade away moves the gain by well under the measurement's repeatability).
CORNER_SPAN_RATIO = 1.2
#: An isolation path's frequency slope a fit may reach, dB per octave: twice a coupling
#: capacitance's −6 dB per octave either way (common practice, no source).
ISOLATION_SLOPE_BOUND = 12.0

#: The load mismatch ΔR/R a fit may reach: ±5 % (integrated load resistors match to well
#: under 1 %; common practice, no source). The even-order products see ε + D_0 (the quad's
#: DC imbalance from its offsets, kept from the template) only through their power, so the
#: sign of ε + D_0 is not observable: the fit keeps the side the template starts on.
LOAD_MISMATCH_BOUND = 0.05


@dataclass(frozen=True)
class FitParameter:
    """One fittable parameter.

    ``key``: the part-file key (``"core.tail_current"``); ``unit`` and ``display_scale``:
    how the report shows it (value × scale in unit); ``log``: fitted as log10 of the SI
    value; ``bounds``: SI (low, high); ``get`` / ``put``: read and write it on a part;
    ``needs``: the observations → ``None`` when constrained, else why not. ``group``: the
    figures that constrain it (``"core"``: gain, compression and intercepts; else the one
    figure name), fitted together (see :mod:`sweeprig.twin.fit`).
    """

    key: str
    unit: str
    display_scale: float
    log: bool
    bounds: tuple[float, float]
    get: Callable[[MixerPart], float | None]
    put: Callable[[MixerPart, float], MixerPart]
    needs: Callable[[ObservationSet], str | None]
    what: str
    group: str = "core"

    def to_internal(self, value: float) -> float:
        """SI value → the fit's coordinate."""
        return math.log10(value) if self.log else value

    def to_si(self, internal: float) -> float:
        """The fit's coordinate → SI value."""
        if not self.log:
            return internal
        return 10.0 ** internal if internal < 300.0 else math.inf

    def internal_bounds(self) -> tuple[float, float]:
        """Bounds in the fit's coordinate."""
        return self.to_internal(self.bounds[0]), self.to_internal(self.bounds[1])


def _attr(name: str) -> tuple[Callable[[MixerPart], float | None],
                              Callable[[MixerPart, float], MixerPart]]:
    return (lambda p: getattr(p, name)), (lambda p, v: p.with_changes(**{name: v}))


def _port(port: str, field_name: str) -> tuple[Callable[[MixerPart], float | None],
                                                Callable[[MixerPart, float], MixerPart]]:
    attr = f"{port}_port"

    def get(p: MixerPart) -> float | None:
        return getattr(getattr(p, attr), field_name)

    def put(p: MixerPart, v: float) -> MixerPart:
        network: PortNetwork = getattr(p, attr)
        return p.with_changes(**{attr: replace(network, **{field_name: v})})

    return get, put


def _having(*names: str, at_least: int = 1) -> Callable[[ObservationSet], str | None]:
    def needs(obs: ObservationSet) -> str | None:
        n = sum(len(obs.named(name)) for name in names)
        return None if n >= at_least else (
            f"no usable {' or '.join(names)} figure (none measured, or all left out)")
    return needs


def _distinct(name: str, key: str, at_least: int, what: str) -> Callable[[ObservationSet],
                                                                          str | None]:
    def needs(obs: ObservationSet) -> str | None:
        n = len(obs.distinct(name, key))
        return None if n >= at_least else f"{name} measured at {n} {what} (needs {at_least})"
    return needs


def _lo_powers(obs: ObservationSet) -> str | None:
    powers = set(obs.distinct("conversion_gain", "lo_power_dbm"))
    powers |= set(obs.distinct("lo_drive_gain", "lo_power_dbm"))
    n = len(powers)
    return None if n >= 3 else f"gain measured at {n} LO powers (needs 3)"


def _rf_span(obs: ObservationSet) -> str | None:
    freqs = obs.distinct("conversion_gain", "rf_freq_hz")
    if len(freqs) < 3:
        return f"conversion gain measured at {len(freqs)} RF frequencies (needs 3)"
    if freqs[-1] / freqs[0] < CORNER_SPAN_RATIO:
        return (f"the RF frequencies span only {freqs[0] / 1e9:.3g}-{freqs[-1] / 1e9:.3g} GHz "
                f"(needs a ratio of {CORNER_SPAN_RATIO:g})")
    return None


def _swept(name: str, key: str) -> Callable[[ObservationSet], str | None]:
    """A leakage figure at 3 or more frequencies (condition ``key``) spanning the corners'
    ratio: enough for a slope beside the level (3 points leave one degree of freedom)."""
    def needs(obs: ObservationSet) -> str | None:
        freqs = obs.distinct(name, key)
        if len(freqs) < 3:
            return f"{name} measured at {len(freqs)} frequencies (needs 3 for a slope)"
        if freqs[-1] / freqs[0] < CORNER_SPAN_RATIO:
            return (f"{name} measured over {freqs[0] / 1e9:.3g}-{freqs[-1] / 1e9:.3g} GHz "
                    f"(needs a ratio of {CORNER_SPAN_RATIO:g} for a slope)")
        return None
    return needs


def _both(*rules: Callable[[ObservationSet], str | None]) -> Callable[[ObservationSet],
                                                                       str | None]:
    def needs(obs: ObservationSet) -> str | None:
        for rule in rules:
            why = rule(obs)
            if why:
                return why
        return None
    return needs


def _even_order(part: MixerPart) -> Callable[[ObservationSet], str | None]:
    having = _having("iip2_point_low", "iip2_point_high")

    def needs(obs: ObservationSet) -> str | None:
        why = having(obs)
        if why:
            return why
        if not part.cm_second_order:
            return ("the template has no common-mode second-order current "
                    "(core.cm_second_order = 0), so the load mismatch moves no IM2 line")
        return None
    return needs


def feedthrough_figure(part: MixerPart) -> str:
    """The figure of the input→output feedthrough path (``isolation.rf_to_if``): a
    downconverter's ``rf_if_isolation``, an upconverter's ``if_rf_isolation``."""
    return "rf_if_isolation" if part.conversion == "down" else "if_rf_isolation"


def _slopes(part: MixerPart) -> tuple[FitParameter, ...]:
    """The isolation paths' frequency slopes (dB per octave about the part's isolation
    reference frequency), each fitted with its path's level when the run swept frequency."""
    bound = (-ISOLATION_SLOPE_BOUND, ISOLATION_SLOPE_BOUND)
    through = "RF→IF" if part.conversion == "down" else "IF→RF (input→output)"
    paths = (("lo_to_if", "lo_if", "lo_if_isolation", "lo_freq_hz", "LO→IF"),
             ("lo_to_rf", "lo_rf", "lo_rf_isolation", "lo_freq_hz", "LO→RF"),
             ("rf_to_if", "rf_if", feedthrough_figure(part), "rf_freq_hz", through))
    return tuple(
        FitParameter(f"isolation.{key}_slope", "dB/octave", 1.0, False, bound,
                     *_attr(f"isolation_{attr}_slope_db_per_octave"), _swept(figure, cond),
                     f"{label} path's change with frequency", figure)
        for key, attr, figure, cond, label in paths)


def catalogue(part: MixerPart, obs: ObservationSet) -> tuple[FitParameter, ...]:
    """Every parameter a fit of ``part`` may move, bounds set from the data where they
    depend on it (the input port's corners stay outside the measured band).

    The input port is the RF port of a downconverter and the IF port of an upconverter
    (``rf_freq_hz`` is the input tone's frequency either way); the isolations keep their
    physical port names, and the feedthrough path is constrained by
    :func:`feedthrough_figure`."""
    freqs = obs.distinct("conversion_gain", "rf_freq_hz") or (1e9,)
    f_lo, f_hi = freqs[0], freqs[-1]
    inp = "rf" if part.conversion == "down" else "if"
    through = feedthrough_figure(part)
    return (
        FitParameter("core.tail_current", "mA", 1e3, True, (0.1e-3, 100e-3),
                     *_attr("tail_current_a"), _having("conversion_gain"),
                     "tail current I_EE: with the degeneration, the transconductance (gain)"),
        FitParameter("core.emitter_degeneration", "ohm", 1.0, False, (0.0, 500.0),
                     *_attr("emitter_degeneration_ohm"),
                     _having("input_p1db", "compression_gain", "iip3_point_low",
                             "iip3_point_high"),
                     "emitter degeneration R_E: sets compression and the intercepts"),
        FitParameter("ports.lo.resistance", "ohm", 1.0, True, (10.0, 2000.0),
                     *_port("lo", "resistance_ohm"),
                     _lo_powers,
                     "LO port resistance: the LO swing at the quad, so the LO-drive "
                     "dependence of the gain"),
        FitParameter(f"ports.{inp}.highpass", "GHz", 1e-9, True,
                     (1e6, max(f_lo / 1.01, 1.1e6)),
                     *_port(inp, "highpass_hz"), _rf_span,
                     f"{inp.upper()} (input) port high-pass corner: the gain's fall at the "
                     "low end of the band"),
        FitParameter(f"ports.{inp}.lowpass", "GHz", 1e-9, True, (f_hi * 1.01, 200e9),
                     *_port(inp, "lowpass_hz"), _rf_span,
                     f"{inp.upper()} (input) port low-pass corner: the gain's fall at the "
                     "high end of the band"),
        FitParameter("core.tail_supply_coeff", "/V", 1.0, False, (-1.0, 1.0),
                     *_attr("tail_supply_coeff_per_v"),
                     _distinct("conversion_gain", "supply_v", 2, "supplies"),
                     "tail current's supply coefficient: gain versus supply"),
        FitParameter("core.aux_current", "mA", 1e3, False, (0.0, 500e-3),
                     *_attr("aux_current_a"), _having("supply_current"),
                     "current besides the cell (LO buffers, bias): the supply current",
                     "supply_current"),
        FitParameter("isolation.lo_to_if", "dB", 1.0, False, (0.0, 120.0),
                     *_attr("isolation_lo_if_db"), _having("lo_if_isolation"),
                     "LO→IF leakage path (on top of what the core's offsets make)",
                     "lo_if_isolation"),
        FitParameter("isolation.lo_to_rf", "dB", 1.0, False, (0.0, 120.0),
                     *_attr("isolation_lo_rf_db"), _having("lo_rf_isolation"),
                     "LO→RF leakage path", "lo_rf_isolation"),
        FitParameter("isolation.rf_to_if", "dB", 1.0, False, (0.0, 120.0),
                     *_attr("isolation_rf_if_db"), _having(through),
                     "input→output feedthrough path (on top of what the quad's offsets "
                     "make)", through),
        *_slopes(part),
        FitParameter("mismatch.load", "", 1.0, False, (-LOAD_MISMATCH_BOUND, LOAD_MISMATCH_BOUND),
                     *_attr("load_mismatch"), _even_order(part),
                     "load mismatch ΔR/R: with the quad's DC imbalance and the input pair's "
                     "common-mode current, the even-order (IM2) products at the output",
                     "even_order"),
        FitParameter("noise.figure", "dB", 1.0, False, (0.0, 40.0),
                     *_attr("noise_figure_db"), _having("noise_figure"),
                     "noise figure at the reference temperature", "noise_figure"),
        FitParameter("noise.figure_tempco", "dB/degC", 1.0, False, (-0.2, 0.2),
                     *_attr("noise_figure_tempco_db_per_c"),
                     _distinct("noise_figure", "temperature_c", 2, "temperatures"),
                     "noise figure's temperature coefficient", "noise_figure"),
    )


#: What the fit never moves, and why (said in the report and the part file).
NOT_FITTED: tuple[tuple[str, str], ...] = (
    ("mismatch.quad_offset_*, mismatch.rf_pair_offset, core.cm_second_order", "the IM2 "
     "lines see the offsets, the load mismatch and the common-mode current only as one "
     "product, c2·(ε + D_0): the im2 readings set it through mismatch.load alone; the "
     "offsets (which also shape the leakage the isolation paths are fitted on top of) and "
     "c2 keep the template's values"),
    ("ports.*.return_loss, the output port's corners", "port matches and the output "
     "port's corners (IF of a downconverter, RF of an upconverter) are not fitted: the "
     "template's values are kept"),
    ("noise.lo_nominal, noise.switch_share, core.min_supply", "kept "
     "from the template"),
)
