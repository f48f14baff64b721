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

from sweeprig.lazy import lazy_names

#: Where each public name is defined; a name is imported when first asked for, so that
#: importing one instruments module (a profile's limits, say, for ``sweeprig check``) does
#: not load every driver and the transports.
_WHERE = {
    "DRIVER_CLASSES": "sweeprig.instruments.factory",
    "make_driver": "sweeprig.instruments.factory",
    "AnalyzerDriver": "sweeprig.instruments.analyzer",
    "AnalyzerSettings": "sweeprig.instruments.analyzer",
    "ChamberDriver": "sweeprig.instruments.chamber",
    "Driver": "sweeprig.instruments.driver",
    "Value": "sweeprig.instruments.driver",
    "PowerMeterDriver": "sweeprig.instruments.powermeter",
    "Profile": "sweeprig.instruments.profile",
    "available_profiles": "sweeprig.instruments.profile",
    "load_profile": "sweeprig.instruments.profile",
    "matching_profiles": "sweeprig.instruments.profile",
    "SimControlDriver": "sweeprig.instruments.simctl",
    "SourceDriver": "sweeprig.instruments.source",
    "SupplyDriver": "sweeprig.instruments.supply",
    "SwitchDriver": "sweeprig.instruments.switch",
}

__getattr__ = lazy_names(__name__, _WHERE, globals())

__all__ = sorted(_WHERE)
