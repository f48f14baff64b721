"""The project's error tree.

Every error a user can see says *where* (file:line:key, or instrument role and command),
*what* is wrong and *how to fix it*. Library exceptions are translated into these at the
boundary (``raise ... from exc``) so the CLI can print one clear message and exit non-zero.
"""

from __future__ import annotations

from sweeprig.text import escape_controls


class SweeprigError(Exception):
    """Root of every error sweeprig raises on purpose.

    ``where``: the place (``"bench.toml:12: roles.rf.resource"``,
    ``"role 'sa', command 'FREQ:SPAN 1e9'"``).
    ``what``: what is wrong, one sentence.
    ``fix``: how to fix it, one sentence (optional).
    """

    exit_code = 2
    #: Further problems found in the same pass over the same file (``sweeprig check`` lists
    #: them all; other commands print the first and say how many more there are).
    also: tuple[SweeprigError, ...] = ()

    def __init__(self, what: str, *, where: str | None = None, fix: str | None = None) -> None:
        self.what = what
        self.where = where
        self.fix = fix
        super().__init__(self.message())

    def message(self) -> str:
        """``where: what`` and the fix on the next line, control characters escaped (the
        parts may quote a file, and the message may reach a terminal or a report)."""
        what = escape_controls(self.what)
        if self.also:
            more = len(self.also)
            what += (f" ({more} more problem{'s' if more > 1 else ''} in this file: "
                     "`sweeprig check` lists every one)")
        head = f"{escape_controls(self.where)}: {what}" if self.where else what
        return f"{head}\n  fix: {escape_controls(self.fix)}" if self.fix else head


class InputError(SweeprigError):
    """A sequence, bench, part, driver-profile or data file is wrong."""


class UnitError(InputError):
    """A quantity such as "2.4 GHz" could not be parsed or has the wrong dimension."""


class SafetyLimitError(SweeprigError):
    """A planned or requested setting would exceed a configured safety limit."""

    exit_code = 3


class InstrumentError(SweeprigError):
    """An instrument refused a command, reported an error, or did not answer."""

    exit_code = 4


class TransportError(InstrumentError):
    """The connection to an instrument failed (timeout, dropped socket, garbled reply)."""


class StoreError(SweeprigError):
    """The run store cannot be opened, read or written."""

    exit_code = 5


BENCH_UNSAFE_EXIT_CODE = 8
"""Exit code of ``run``, ``resume`` and ``safe`` when the bench could not be proven safe
(a safe-state read-back failed or disagreed). Distinct from every other failure's code."""


VERDICT_FAILED_EXIT_CODE = 6
"""Exit code of ``run`` and ``report`` with ``--fail-on-verdict`` when a figure fails a limit."""

VERDICT_INCONCLUSIVE_EXIT_CODE = 9
"""Exit code of ``run`` and ``report`` with ``--fail-on-verdict`` when no limit fails but the
verdict cannot be a pass: a figure a limit needs is missing, suspect or straddles it, the run
did not measure every point, or its figures could not be made. A script must not read it as a
pass."""


def verdict_exit_code(verdict: str | None) -> int:
    """The exit code of ``--fail-on-verdict`` for a verdict: 0 for ``pass``,
    :data:`VERDICT_FAILED_EXIT_CODE` for ``fail``, :data:`VERDICT_INCONCLUSIVE_EXIT_CODE` for
    ``inconclusive`` and for no verdict at all (the figures could not be made)."""
    if verdict == "pass":
        return 0
    if verdict == "fail":
        return VERDICT_FAILED_EXIT_CODE
    return VERDICT_INCONCLUSIVE_EXIT_CODE


class BenchUnsafeError(InstrumentError):
    """The safe state could not be verified on at least one instrument: check it by hand."""

    exit_code = BENCH_UNSAFE_EXIT_CODE
