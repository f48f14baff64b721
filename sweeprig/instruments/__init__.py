"""Generic instrument drivers, described by profiles (``drivers/*.toml``).

Typical use::

    from sweeprig.instruments import make_driver
    from sweeprig.transport.visa import VisaTransport

    sa = make_driver("scpi-analyzer", "sa", VisaTransport("TCPIP0::127.0.0.1::5025::SOCKET"))
    sa.identify(); sa.prepare()
    sa.configure(centre_hz=70e6, span_hz=1e6, rbw_hz=10e3, ref_level_dbm=0, attenuation_db=10)
    sa.sweep(); level_dbm = sa.marker_level_dbm(70e6); sa.check_errors()
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path

from sweeprig.clock import Clock
from sweeprig.errors import InputError
from sweeprig.instruments.analyzer import AnalyzerDriver, AnalyzerSettings
from sweeprig.instruments.chamber import ChamberDriver
from sweeprig.instruments.driver import Driver, Value
from sweeprig.instruments.ops import KINDS
from sweeprig.instruments.powermeter import PowerMeterDriver
from sweeprig.instruments.profile import (
    DEFAULT_PROFILE_FOR_KIND,
    Profile,
    available_profiles,
    load_profile,
    matching_profiles,
)
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


__all__ = [
    "DRIVER_CLASSES",
    "AnalyzerDriver",
    "AnalyzerSettings",
    "ChamberDriver",
    "Driver",
    "PowerMeterDriver",
    "Profile",
    "SimControlDriver",
    "SourceDriver",
    "SupplyDriver",
    "SwitchDriver",
    "Value",
    "available_profiles",
    "load_profile",
    "make_driver",
    "matching_profiles",
]
