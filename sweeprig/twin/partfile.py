"""A fitted twin as a part file (the schema of :mod:`sweeprig.sim.mixer.part`).

Every key is written out (so the file stands alone, without its template), in the part
file's units; each fitted key carries its 95 % interval in a comment, each key the run did
not constrain says so and why, and the header names the run, the template and the fit's
residuals. :func:`part_file_text` is pure; :func:`write_part_file` checks the text loads as
a part before it replaces anything.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from pathlib import Path

from sweeprig.files import replace_text
from sweeprig.sim.mixer.part import MixerPart, PortNetwork, part_from_mapping
from sweeprig.twin.fit import (
    BENCH_LEVEL_U_DB,
    WEAK_CORRELATION,
    WEAK_LEVEL_SHARE,
    FittedParameter,
    TwinFit,
)
from sweeprig.twin.parameters import NOT_FITTED

_Q = Callable[[float], str]


def _num(value: float, digits: int = 6) -> str:
    return f"{value:.{digits}g}"


def part_file_text(fit: TwinFit, *, name: str, source: str, template: str) -> str:
    """The part file of ``fit.part`` named ``name`` (``source``: which run it was fitted
    to, for the header; ``template``: the part whose unfitted values it keeps)."""
    part = fit.part
    fitted = {p.key: p for p in fit.parameters}
    unconstrained = dict(fit.unconstrained)

    def note(key: str) -> str:
        if key in fitted:
            return "  # " + _fitted_note(fitted[key])
        if key in unconstrained:
            return f"  # not constrained by the run ({unconstrained[key]}): template value"
        return ""

    def line(key: str, text: str) -> str:
        return f"{key.split('.')[-1]} = {text}{note(key)}"

    lines = [
        f"# Twin of {source}: the behavioural mixer model fitted by least squares",
        f"# (sweeprig twin fit). Template for everything the run did not constrain: {template}.",
        f"# {fit.observations} figures, {len(fit.parameters)} parameters, "
        f"residual scale s = {_num(fit.residual_scale, 3)} (1 = the figures' nominal scatter).",
        "# Intervals: 95 %, from the Jacobian (cov = s²·(JᵀJ)⁻¹, the run's scatter) plus what",
        "# unseen bench level errors (RF, LO, output, and the noise source's ENR for the noise",
        f"# figure; u = {BENCH_LEVEL_U_DB:g} dB each) move the estimate by; a larger path-loss",
        "# error than that (an uncalibrated bench) is not in them.",
        f"# {fit.bias_note}.",
        "# Residuals, model − measured (mean / RMS / worst):",
    ]
    for r in fit.residuals:
        unit_scale, unit = (1e3, "mA") if r.unit == "A" else (1.0, r.unit)
        lines.append(f"#   {r.name} ×{r.count}: {r.mean * unit_scale:+.3f} / "
                     f"{r.rms * unit_scale:.3f} / {r.worst * unit_scale:+.3f} {unit}")
    for keys, why in NOT_FITTED:
        lines.append(f"# Not fitted ({keys}): {why}.")
    lines += [
        "",
        "[part]",
        f"name = {_string(name)}",
        f"description = {_string(f'Twin of {source} (fitted; template {template})')}",
        f'conversion = "{part.conversion}"',
        "",
        "[core]",
        line("core.tail_current", f'"{_num(part.tail_current_a * 1e3)} mA"'),
        line("core.emitter_degeneration", f'"{_num(part.emitter_degeneration_ohm)} ohm"'),
        f"cells = {part.cells}",
        f'bias = "{part.bias}"' + ("  # " + fit.bias_note if "chosen" in fit.bias_note else ""),
        f'reference_temperature = "{_num(part.reference_temperature_c)} degC"',
        f'nominal_supply = "{_num(part.nominal_supply_v)} V"',
        f'min_supply = "{_num(part.min_supply_v)} V"',
        line("core.tail_supply_coeff", _num(part.tail_supply_coeff_per_v)),
        line("core.aux_current", f'"{_num(part.aux_current_a * 1e3)} mA"'),
        f"aux_supply_coeff = {_num(part.aux_supply_coeff_per_v)}",
        f"cm_second_order = {_num(part.cm_second_order)}",
        "",
        "[mismatch]  # offsets: template values (see the header); load: the even-order fit",
        f'quad_offset_1 = "{_num(part.quad_offset_1_v * 1e3)} mV"',
        f'quad_offset_2 = "{_num(part.quad_offset_2_v * 1e3)} mV"',
        f'rf_pair_offset = "{_num(part.rf_pair_offset_v * 1e3)} mV"',
        line("mismatch.load", _num(part.load_mismatch)),
    ]
    for label, port in (("rf", part.rf_port), ("lo", part.lo_port), ("if", part.if_port)):
        lines += ["", f"[ports.{label}]", *_port_lines(label, port, line)]
    iso = (("lo_to_rf", part.isolation_lo_rf_db), ("lo_to_if", part.isolation_lo_if_db),
           ("rf_to_if", part.isolation_rf_if_db), ("rf_to_lo", part.isolation_rf_lo_db))
    slopes = {"lo_to_rf": part.isolation_lo_rf_slope_db_per_octave,
              "lo_to_if": part.isolation_lo_if_slope_db_per_octave,
              "rf_to_if": part.isolation_rf_if_slope_db_per_octave,
              "rf_to_lo": part.isolation_rf_lo_slope_db_per_octave}
    lines += ["", "[isolation]",
              f'reference_frequency = "{_num(part.isolation_reference_hz / 1e9)} GHz"'
              "  # each path's level holds here; its slope is dB per octave about it"]
    for key, value in iso:
        if value is not None:
            lines.append(line(f"isolation.{key}", f'"{_num(value, 5)} dB"'))
            lines.append(line(f"isolation.{key}_slope", _num(slopes[key], 4)))
        else:
            lines.append(f"# {key}: no extra path{note(f'isolation.{key}')}")
    lines += [
        "",
        "[noise]",
        line("noise.figure", f'"{_num(part.noise_figure_db, 5)} dB"'),
        line("noise.figure_tempco", _num(part.noise_figure_tempco_db_per_c)),
    ]
    if part.noise_lo_nominal_dbm is not None:
        lines.append(f'lo_nominal = "{_num(part.noise_lo_nominal_dbm)} dBm"')
    lines += [
        f"switch_share = {_num(part.noise_switch_share)}",
        "",
        "[model]",
        f"max_lo_order = {part.max_lo_order}",
        f"max_rf_order = {part.max_rf_order}",
        f'floor = "{_num(part.floor_dbm)} dBm"',
        "",
    ]
    return "\n".join(lines)


def _port_lines(label: str, port: PortNetwork, line: Callable[[str, str], str]) -> list[str]:
    out = [line(f"ports.{label}.resistance", f'"{_num(port.resistance_ohm)} ohm"')]
    if port.return_loss_db is not None:
        out.append(f'return_loss = "{_num(port.return_loss_db)} dB"')
    if port.highpass_hz is not None:
        out.append(line(f"ports.{label}.highpass", f'"{_num(port.highpass_hz / 1e9)} GHz"'))
    if port.lowpass_hz is not None:
        out.append(line(f"ports.{label}.lowpass", f'"{_num(port.lowpass_hz / 1e9)} GHz"'))
    return out


def _fitted_note(p: FittedParameter) -> str:
    k = p.display_scale
    if p.at_bound:
        return f"fitted, ended on its bound ({p.what}): no interval"
    if not (math.isfinite(p.low) and math.isfinite(p.high)):
        return "fitted, no interval (the run cannot tell this direction apart)"
    text = f"fitted: 95 % interval {_num(p.low * k, 4)} to {_num(p.high * k, 4)} {p.unit}".rstrip()
    if p.weakly_identified:
        why = []
        if p.level_share >= WEAK_LEVEL_SHARE:
            why.append(f"{p.level_share:.0%} of its variance is the bench's level errors")
        if abs(p.correlation) >= WEAK_CORRELATION:
            why.append(f"trades off against {p.correlated_with} (ρ = {p.correlation:+.2f})")
        text += "; weakly identified: " + ", ".join(why)
    return text


def _string(text: str) -> str:
    escaped = text.replace("\\", "\\\\").replace('"', '\\"')
    return f'"{escaped}"'


def check_part_text(text: str) -> MixerPart:
    """Parse ``text`` as a part file (raises :class:`InputError` if it is not one)."""
    import tomllib

    return part_from_mapping(tomllib.loads(text))


def write_part_file(text: str, path: Path) -> None:
    """Write ``text`` to ``path`` whole (a temporary file beside it, then renamed), after
    checking it loads as a part; nothing is written when it does not."""
    check_part_text(text)
    replace_text(path, text)
