"""Pre-flight checks of noise-figure readings: the bench has a noise source with its drive, its
ENR table has not expired and covers every frequency the readings need (the signal and image
bands at the part's input, the IF for the system calibration). Refused before anything is
powered: the caller runs this with the other pre-flight checks."""

from __future__ import annotations

from datetime import UTC, date, datetime

from sweeprig.errors import InputError
from sweeprig.formats.bench import Bench
from sweeprig.formats.sequence import Sequence


def today_utc() -> date:
    """Today's date in UTC, which an ENR table's expiry is judged against."""
    return datetime.now(UTC).date()


def check_noise_figure(sequence: Sequence, bench: Bench, today: datetime | None = None
                       ) -> None:
    """InputError for a sequence with noise_figure readings the bench cannot take."""
    studies = [s for s in sequence.study if any(r.kind == "noise_figure" for r in s.readings())]
    if not studies:
        return
    if bench.noise_source is None or bench.enr_table is None:
        raise InputError(
            f"study {studies[0].name!r} reads noise_figure, but the bench has no noise source",
            where=bench.where(("roles",)),
            fix="add a [noise_source] table (enr_file, drive_voltage) and roles.nsdc, the "
            "supply that drives it, to the bench file")
    ns = bench.noise_source
    if ns.drive == "sa":
        from sweeprig.plan.instrument_limits import role_profile

        profile = role_profile(bench, "sa")
        if not profile.has("noise_source"):
            raise InputError(
                "the noise source is driven by the analyzer's noise-source output, but the "
                f"analyzer's profile {profile.name!r} has no noise_source operation",
                where=bench.where(("roles", "sa")),
                fix='use a profile with one (e.g. "scpi-analyzer-ns"; or add [ops.noise_source] '
                "with a command and a query to yours), or drive the source from a supply: "
                'noise_source.drive = "nsdc"')
    if ns.cold_temperature == "ambient" and ns.room_temperature is None and (
            sequence.conditions.temperature is None or bench.role("chamber") is None):
        raise InputError(
            "the noise source's cold temperature is the measured ambient, but this run opens "
            "no chamber probe to read it", where=bench.where(("noise_source",)),
            fix='state room_temperature = "23 degC" (or a cold_temperature) in [noise_source]')
    table = bench.enr_table
    where = bench.where(("noise_source", "enr_file"))
    table.check_current(today.date() if today is not None else today_utc(), where=where)
    from sweeprig.plan.expand import PointBuilder  # the points of the noise studies only

    builder = PointBuilder(sequence, bench)
    lay = builder.layout
    needed: set[float] = set()
    for block in lay.blocks:
        if block.study.name not in {s.name for s in studies}:
            continue
        first = lay.first_index(0, 0, block)
        for local in range(block.count):
            p = builder.point(first + local)
            needed |= {p.rf_freq_hz, abs(2.0 * p.lo_freq_hz - p.rf_freq_hz), p.if_freq_hz}
    table.check_covers(sorted(needed), where=where,
                       what="the noise_figure readings (signal, image and IF bands)")
