"""The driver for an instrument kind or profile: :func:`make_driver`."""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path

from sweeprig.clock import Clock
from sweeprig.errors import InputError
from sweeprig.instruments.analyzer import AnalyzerDriver
from sweeprig.instruments.chamber import ChamberDriver
from sweeprig.instruments.driver import Driver
from sweeprig.instruments.ops import KINDS
from sweeprig.instruments.powermeter import PowerMeterDriver
from sweeprig.instruments.profile import DEFAULT_PROFILE_FOR_KIND, Profile, load_profile
from sweeprig.instruments.simctl import SimControlDriver
from sweeprig.instruments.source import SourceDriver
from sweeprig.instruments.supply import SupplyDriver
from sweeprig.instruments.switch import SwitchDriver
from sweeprig.transport.base import Transport

DRIVER_CLASSES: dict[str, type[Driver]] = {
    "source": SourceDriver,
    "analyzer": AnalyzerDriver,
    "powermeter": PowerMeterDriver,
    "supply": SupplyDriver,
    "chamber": ChamberDriver,
    "switch": SwitchDriver,
    "simctl": SimControlDriver,
}
"""Instrument kind → driver class."""


def make_driver(
    kind_or_profile: str | Path | Profile,
    role: str,
    transport: Transport,
    *,
    clock: Clock | None = None,
    search_dirs: Iterable[Path | str] = (),
) -> Driver:
    """The driver for ``kind_or_profile``: a :class:`Profile`, a profile name
    (``"scpi-source"``), a profile file path, or a kind (``"source"`` → its generic profile).
    """
    if isinstance(kind_or_profile, Profile):
        profile = kind_or_profile
    elif isinstance(kind_or_profile, str) and kind_or_profile in KINDS:
        profile = load_profile(DEFAULT_PROFILE_FOR_KIND[kind_or_profile], search_dirs=search_dirs)
    elif isinstance(kind_or_profile, str | Path):
        profile = load_profile(kind_or_profile, search_dirs=search_dirs)
    else:
        raise InputError(
            f"{kind_or_profile!r} is not a profile, profile name or instrument kind",
            where=f"role {role!r}",
            fix=f"give a profile name or one of the kinds {', '.join(KINDS)}",
        )
    return DRIVER_CLASSES[profile.kind](role, transport, profile, clock=clock)
