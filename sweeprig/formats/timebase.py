"""The bench file's ``[timebase]``: which 10 MHz reference each instrument runs on.

Every source and the analyzer make or measure frequencies from a 10 MHz reference: their own
crystal (free-running, off by up to its stated tolerance), or the 10 MHz of another
instrument or of an external standard fed to their reference input (locked: the same error
as what feeds them). A product made by sources on different references lands off its
computed frequency by each reference's error times what it multiplies in the product
(:mod:`sweeprig.plan.frequency_error`); the analyzer's own reference shifts what it reads.

.. code-block:: toml

    [timebase]
    sa = { internal = "0.1 ppm" }     # its own crystal, within ±0.1 ppm
    lo = { lock = "sa" }              # reference input from the analyzer's 10 MHz output
    rf = { lock = "lab" }             # reference input from the external reference "lab"
    rf2 = { internal = "2 ppm" }

    [timebase.external]
    lab = "0.001 ppm"                 # an external reference and its tolerance, ±

A role the section leaves out runs on its own crystal with :data:`DEFAULT_CRYSTAL_PPM`
(assumed). Without a ``[timebase]`` section sweeprig reads every product at its computed
frequency, as if every reference were shared (the behaviour before this section existed).
Roles with ``lock`` are set to their external reference at connect and their lock is read
back where the profile can (:mod:`sweeprig.engine.timebase`).
"""

from __future__ import annotations

import difflib
from collections.abc import Callable, Mapping
from dataclasses import dataclass

from pydantic import Field

from sweeprig.errors import InputError
from sweeprig.formats.fields import Frozen, Ppm

#: Roles whose reference moves a product: the sources make it, the analyzer measures it.
TIMEBASE_ROLES: tuple[str, ...] = ("rf", "rf2", "lo", "sa")
#: Tolerance of a crystal the bench file does not state, ± ppm: an unheated crystal reference
#: of a bench instrument over a year and the lab's temperature range (common practice, no
#: source).
DEFAULT_CRYSTAL_PPM = 2.0
#: Largest tolerance accepted, ppm: beyond it the "reference" is not a frequency standard.
MAX_TOLERANCE_PPM = 1000.0


class ReferenceUse(Frozen):
    """What one instrument's 10 MHz comes from: ``internal`` (its own crystal, with this
    tolerance) or ``lock`` (a role or an external reference feeding its reference input)."""

    internal: Ppm | None = Field(None, description='its own crystal, free-running, within ± '
                                 'this, e.g. "2 ppm"')
    lock: str | None = Field(None, description='locked to another role\'s 10 MHz output '
                             '(e.g. "sa") or to an external reference named in '
                             '[timebase.external]')


class Timebase(Frozen):
    """Which reference each source and the analyzer runs on (see the module docstring)."""

    rf: ReferenceUse | None = None
    rf2: ReferenceUse | None = None
    lo: ReferenceUse | None = None
    sa: ReferenceUse | None = None
    external: dict[str, Ppm] = Field(
        default_factory=dict, description='external 10 MHz references by name and their '
        'tolerance, ± (e.g. lab = "0.001 ppm")')


@dataclass(frozen=True)
class ResolvedTimebase:
    """Per role, the reference it finally runs on and its tolerance, ppm; per role, whether
    it must be locked to its reference input (``locked``)."""

    reference: Mapping[str, str]
    tolerance_ppm: Mapping[str, float]
    locked: frozenset[str]
    assumed: frozenset[str]

    def tolerance_of(self, role: str) -> float:
        """The ± tolerance, ppm, of the reference ``role`` runs on."""
        return self.tolerance_ppm[self.reference[role]]


def resolve_timebase(timebase: Timebase, present: Callable[[str], bool],
                     where: Callable[[tuple[str | int, ...]], str]) -> ResolvedTimebase:
    """Follow every ``lock`` to the crystal or external reference at its end; refuse a lock
    to nothing, to a role the bench lacks, a cycle, an impossible tolerance (located).

    ``present(role)``: whether the bench has that role; ``where(key)``: a key's location.
    """
    for name, tol in timebase.external.items():
        if name in TIMEBASE_ROLES or name.endswith(":crystal"):
            raise InputError(f"external reference {name!r} has the name of a role",
                             where=where(("timebase", "external", name)),
                             fix='give the external reference its own name, e.g. "lab"')
        _check_tolerance(tol, where(("timebase", "external", name)))
    uses: dict[str, ReferenceUse] = {}
    for role in TIMEBASE_ROLES:
        use = getattr(timebase, role)
        if use is None:
            continue
        here = ("timebase", role)
        if (use.internal is None) == (use.lock is None):
            raise InputError(f"timebase.{role} needs exactly one of internal or lock",
                             where=where(here),
                             fix=f'write {role} = {{ internal = "2 ppm" }} (its own crystal) or '
                             f'{role} = {{ lock = "sa" }} (its reference input fed by another '
                             'instrument or an external reference)')
        if use.internal is not None:
            _check_tolerance(use.internal, where((*here, "internal")))
        if use.lock is not None:
            target = use.lock
            if target in TIMEBASE_ROLES:
                if not present(target):
                    raise InputError(f"{role} locks to {target!r}, which is not on the bench",
                                     where=where((*here, "lock")),
                                     fix=f"add roles.{target} or lock to another instrument")
            elif target not in timebase.external:
                known = [*TIMEBASE_ROLES, *timebase.external]
                close = difflib.get_close_matches(target, known, n=1)
                hint = f"did you mean {close[0]!r}? " if close else ""
                raise InputError(f"{role} locks to {target!r}, which is neither a role nor an "
                                 "external reference",
                                 where=where((*here, "lock")),
                                 fix=f"{hint}name a role ({', '.join(TIMEBASE_ROLES)}) or add "
                                 f'[timebase.external] {target} = "0.01 ppm"')
        uses[role] = use
    reference: dict[str, str] = {}
    tolerance: dict[str, float] = {name: float(t) for name, t in timebase.external.items()}
    assumed: set[str] = set()
    for role in TIMEBASE_ROLES:
        if not present(role):
            continue
        seen = [role]
        current = role
        while True:
            use = uses.get(current)
            if use is None or use.internal is not None:
                crystal = f"{current}:crystal"
                if use is None:
                    assumed.add(current)
                tolerance[crystal] = DEFAULT_CRYSTAL_PPM if use is None else float(
                    use.internal or 0.0)
                reference[role] = crystal
                break
            assert use.lock is not None
            if use.lock not in TIMEBASE_ROLES:
                reference[role] = use.lock
                break
            if use.lock in seen:
                chain = " → ".join([*seen, use.lock])
                raise InputError(f"the timebase locks go round in a circle: {chain}",
                                 where=where(("timebase", role, "lock")),
                                 fix="let one instrument of the circle run on its own crystal "
                                 '(internal = "...") or on an external reference')
            seen.append(use.lock)
            current = use.lock
    locked = frozenset(r for r, u in uses.items() if u.lock is not None and present(r))
    return ResolvedTimebase(reference, tolerance, locked, frozenset(assumed))


def _check_tolerance(value: float, where: str) -> None:
    if not 0.0 <= value <= MAX_TOLERANCE_PPM:
        raise InputError(f"a reference tolerance of {value:g} ppm is impossible here: it is a "
                         f"± figure within 0 to {MAX_TOLERANCE_PPM:g} ppm",
                         where=where, fix='write its size from the data sheet, e.g. "2 ppm" '
                         'or "50 ppb"')
