"""The bench's ``[timebase]`` applied at connect: every source and the analyzer set to the
reference the bench file names, read back, and a locked one checked for lock.

A role locked in the bench file (``lock = ...``) is set to its reference input
(``external``), one on its own crystal to ``internal``; each setting is read back where the
profile has the query, and a role set to external must not report its reference unlocked
(the profile's ``reference_unlocked``, SCPI-99's questionable FREQuency bit by default).
A profile without a ``reference`` operation cannot be set: the note says so, and the
engineer sets the instrument by hand. Nothing here changes an output.
"""

from __future__ import annotations

from sweeprig.clock import Clock
from sweeprig.errors import InstrumentError
from sweeprig.formats.bench import Bench
from sweeprig.formats.timebase import TIMEBASE_ROLES
from sweeprig.instruments.driver import Driver

#: Reads of the lock status before giving up, and the wait between them, s (a reference
#: loop takes about a second to lock; common practice, no source).
LOCK_READS = 4
LOCK_WAIT_S = 0.5


def apply_timebase(bench: Bench, drivers: dict[str, Driver], clock: Clock) -> list[str]:
    """Set and verify each role's reference; returns notes for what could not be checked.

    Raises :class:`InstrumentError` naming the role when the read-back differs or a locked
    role stays unlocked."""
    refs = bench.references()
    notes: list[str] = []
    if refs is None:
        return notes
    for role in TIMEBASE_ROLES:
        driver = drivers.get(role)
        if driver is None:
            continue
        wanted = "external" if role in refs.locked else "internal"
        feed = _feed(bench, role)
        if not driver.profile.has("reference"):
            notes.append(f"role {role!r}: profile {driver.profile.name!r} cannot select its "
                         f"reference; set it to {wanted} ({feed}) by hand")
            continue
        driver.reference = wanted
        driver.set_value("reference", wanted, force=True)
        driver.check_errors()
        if driver.profile.op("reference").read_back is not None:
            got = driver.read_back("reference")
            if got != wanted:
                raise InstrumentError(
                    f"role {role!r} was set to its {wanted} reference but reads back {got!r}",
                    where=driver.where(), fix="check the profile's reference command against "
                    "the instrument's manual (ops.reference and its map)")
        if wanted == "internal":
            continue
        unlocked = driver.reference_unlocked()
        for _ in range(LOCK_READS - 1):
            if not unlocked:
                break
            clock.sleep(LOCK_WAIT_S)
            unlocked = driver.reference_unlocked()
        if unlocked is None:
            notes.append(f"role {role!r}: profile {driver.profile.name!r} cannot report its "
                         "reference lock; check the instrument's reference indicator")
        elif unlocked:
            raise InstrumentError(
                f"role {role!r} is set to its reference input ({feed}) but reports its "
                "reference unlocked",
                where=bench.where(("timebase", role, "lock")),
                fix=f"check the 10 MHz cable to the reference input of {role!r} and that "
                f"{feed} is on; or, if it is meant to run on its own crystal, write "
                f'{role} = {{ internal = "2 ppm" }} in [timebase]')
    return notes


def _feed(bench: Bench, role: str) -> str:
    use = getattr(bench.timebase, role, None) if bench.timebase is not None else None
    if use is None or use.lock is None:
        return "its own crystal"
    return f"the 10 MHz of {use.lock!r}"
