"""Each bench role's instrument: its driver profile, of the right kind, and every limit on it.

The limits of one role's operation are the profile's own range (the instrument's) plus the
bench file's safety limits and the part's ratings, each bound naming where it was written
(:class:`~sweeprig.instruments.limits.Bound`). :func:`role_limits` builds them once, the same
way for the pre-flight check (``check``, ``plan``, ``run``) and for the drivers of an open bench
(:func:`bench_bounds`, applied by :mod:`sweeprig.engine.connect`), so the two refuse the same
values and name the same origin.
"""

from __future__ import annotations

from sweeprig.errors import InputError
from sweeprig.formats.bench import Bench
from sweeprig.instruments.limits import Bound, OpLimits, profile_limits
from sweeprig.instruments.profile import DEFAULT_PROFILE_FOR_KIND, Profile, load_profile

ROLE_KINDS: dict[str, str] = {
    "rf": "source", "rf2": "source", "lo": "source", "sa": "analyzer", "pm": "powermeter",
    "dc": "supply", "chamber": "chamber", "switch": "switch", "simctl": "simctl",
    "nsdc": "supply",
}
"""The instrument kind each bench role takes (a profile of another kind is refused)."""


def role_profile(bench: Bench, role: str, profile_name: str | None = None) -> Profile:
    """The driver profile of ``role`` (the bench file's, or ``profile_name``), checked to be of
    the kind the role takes. Raises :class:`InputError` at the bench file's ``profile`` key."""
    spec = bench.role(role)
    name = profile_name if profile_name is not None else (spec.profile if spec else "")
    where = bench.where(("roles", role, "profile"))
    try:
        profile = load_profile(name)
    except InputError as exc:
        raise InputError(f"role {role!r}: {exc.what}", where=where, fix=exc.fix) from None
    want = ROLE_KINDS.get(role)
    if want is not None and profile.kind != want:
        raise InputError(
            f"driver profile {profile.name!r} drives {_a(profile.kind)}, but the {role!r} role "
            f"takes {_a(want)} profile (kinds accepted: {want})",
            where=where,
            fix=f"name a {want} profile for roles.{role}, e.g. "
            f"{DEFAULT_PROFILE_FOR_KIND[want]!r}, or move this instrument to a {profile.kind} "
            "role",
        )
    return profile


def _a(noun: str) -> str:
    return f"{'an' if noun[:1] in 'aeiou' else 'a'} {noun}"


def _bench_bound(bench: Bench, key: tuple[str, ...], value: float | None, side: str
                 ) -> Bound | None:
    if value is None:
        return None
    if key[:2] == ("limits", "part"):
        return Bound(float(value), side, "part",  # type: ignore[arg-type]
                     f"the part's rating ({bench.where(key)})")
    return Bound(float(value), side, "bench",  # type: ignore[arg-type]
                 f"the bench file ({bench.where(key)})")


def bench_bounds(bench: Bench, role: str) -> dict[str, tuple[Bound, ...]]:
    """The bench file's limits (and the part's ratings) on ``role``'s operations."""
    lim = bench.limits
    found: dict[str, list[Bound | None]] = {}
    if role in ("rf", "rf2", "lo"):
        found["power"] = [_bench_bound(bench, ("limits", "source_max_power", role),
                                       getattr(lim.source_max_power, role), "max")]
    elif role == "dc":
        found["voltage"] = [
            _bench_bound(bench, ("limits", "supply_max_voltage"), lim.supply_max_voltage, "max"),
            _bench_bound(bench, ("limits", "part", "supply_max"), lim.part.supply_max, "max")]
        found["current_limit"] = [_bench_bound(bench, ("limits", "supply_max_current"),
                                               lim.supply_max_current, "max")]
    elif role == "nsdc" and bench.noise_source is not None:
        ns = bench.noise_source
        key = ("noise_source", "supply_limit" if ns.supply_limit is not None else "drive_voltage")
        found["voltage"] = [_bench_bound(bench, key, ns.voltage_limit_v, "max")]
        found["current_limit"] = [_bench_bound(bench, ("noise_source", "current_limit"),
                                               ns.current_limit, "max")]
    elif role == "chamber":
        found["setpoint"] = [
            _bench_bound(bench, ("limits", "chamber_max"), lim.chamber_max, "max"),
            _bench_bound(bench, ("limits", "chamber_min"), lim.chamber_min, "min")]
    return {op: tuple(b for b in bounds if b is not None) for op, bounds in found.items()}


def role_limits(bench: Bench, role: str, profile: Profile) -> dict[str, OpLimits]:
    """Every numeric operation of ``role``'s profile with all its bounds: the profile's own,
    then the bench file's (the order the drivers of an open bench get them in)."""
    extra = bench_bounds(bench, role)
    out: dict[str, OpLimits] = {}
    for name, operation in profile.ops.items():
        if operation.spec.value not in ("float", "int"):
            continue
        limits = profile_limits(profile, name, role)
        for bound in extra.get(name, ()):
            limits = limits.with_bound(bound)
        out[name] = limits
    return out
