"""Can the simulated part serve this sequence's frequency plan? Warnings for ``--sim``.

A dry run on the simulated bench measures whatever part the bench simulates. When that part
converts the other way, or the sequence drives its ports outside their pass bands, every
figure "fails" for a reason that has nothing to do with the sequence (the demo downconverter
driven as an upconverter reads about −28 dB of "gain"). :func:`sim_part_warnings` says so
before the run; the run prints each warning and records it as an event.

A port's pass band is the part file's ``highpass`` to ``lowpass`` (its first-order corners,
see :mod:`sweeprig.sim.mixer.part`); a frequency outside it is attenuated by 3 dB or more.
The frequencies checked are each study's extremes (input, LO and wanted output), which
bound every point because the frequency plan is affine in each axis.
"""

from __future__ import annotations

from sweeprig.formats.fields import AxisValue, RangeSpec
from sweeprig.formats.sequence import Sequence
from sweeprig.plan import frequencies as fp


def _extremes(value: AxisValue | None) -> tuple[float, ...]:
    if value is None:
        return ()
    if isinstance(value, RangeSpec):
        return (float(value.start), float(value.stop))
    if isinstance(value, tuple):
        return (float(min(value)), float(max(value)))
    return (float(value),)


def plan_ranges(sequence: Sequence) -> dict[str, tuple[float, float]]:
    """The lowest and highest input, LO and wanted-output frequency (Hz) of every point,
    keys ``input``, ``lo``, ``output``; the input counts tone 2 of two-tone studies."""
    conv, side = sequence.mixing.conversion, sequence.mixing.lo_side
    found: dict[str, list[float]] = {"input": [], "lo": [], "output": []}
    for study in sequence.study:
        inputs = _extremes(study.rf_frequency)
        spacing = _extremes(study.tone_spacing)
        f_if = sequence.if_frequency_of(study)
        los = _extremes(study.lo_frequency)
        for f_in in inputs:
            tones = [f_in] + [f_in + s for s in spacing]
            found["input"] += tones
            for tone in tones:
                if f_if is not None:
                    lo_values: tuple[float, ...] = (float(fp.lo_for_if(tone, f_if, conv, side)),)
                else:
                    lo_values = los
                for f_lo in lo_values:
                    found["lo"].append(f_lo)
                    found["output"].append(float(fp.wanted_output_hz(tone, f_lo, conv, side)))
    return {k: (min(v), max(v)) for k, v in found.items() if v}


def _a(conversion: str) -> str:
    return "an upconverter" if conversion == "up" else "a downconverter"


def _mhz(freq_hz: float) -> str:
    return f"{freq_hz / 1e9:g} GHz" if freq_hz >= 1e9 else f"{freq_hz / 1e6:g} MHz"


def sim_part_warnings(sequence: Sequence, sim_description: object = None) -> list[str]:
    """Why the simulated part cannot serve ``sequence`` (empty when it can): a conversion
    direction other than the sequence's, or a frequency outside a port's pass band.

    ``sim_description``: the simulated bench (model, file, shipped name or None); the
    sequence's ``[part] sim_part`` replaces its part as the run does.
    """
    from sweeprig.engine.session import sim_description_for
    from sweeprig.sim.bench import prepare_part, resolve_description
    from sweeprig.sim.mixer import MixerPart

    desc = resolve_description(sim_description_for(sequence, sim_description))  # type: ignore[arg-type]
    part = prepare_part(desc)
    if not isinstance(part, MixerPart):
        return []
    fix = ('name the simulated part the sequence is written for with [part] sim_part = '
           '"NAME" (the shipped parts include the downconverter "kx-2417" and the '
           'upconverter "kx-5860u"), or give --sim-bench a description with that part')
    wanted = sequence.mixing.conversion
    if part.conversion != wanted:
        return [f"the simulated part {part.name} is {_a(part.conversion)}, but the "
                f"sequence is written for {_a(wanted)}: every figure of this dry run "
                f"describes the wrong part (a gain tens of dB low is the plan, not the "
                f"mixer); {fix}"]
    ranges = plan_ranges(sequence)
    ports = (("input", part.input_port, "RF" if wanted == "down" else "IF"),
             ("lo", part.lo_port, "LO"),
             ("output", part.output_port, "IF" if wanted == "down" else "RF"))
    out: list[str] = []
    for key, port, label in ports:
        if key not in ranges:
            continue
        low, high = ranges[key]
        below = port.highpass_hz is not None and low < port.highpass_hz
        above = port.lowpass_hz is not None and high > port.lowpass_hz
        if below or above:
            band = (f"{_mhz(port.highpass_hz) if port.highpass_hz else '0 Hz'} to "
                    f"{_mhz(port.lowpass_hz) if port.lowpass_hz else 'no upper corner'}")
            out.append(f"the sequence drives the simulated part {part.name}'s {label} port "
                       f"({key}) from {_mhz(low)} to {_mhz(high)}, outside its pass band "
                       f"{band}: the figures there are the port's roll-off; {fix}")
    return out

