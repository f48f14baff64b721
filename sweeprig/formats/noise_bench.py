"""The bench file's ``[noise_source]`` table: the noise source, its drive and its ENR table.

::

    [roles]
    nsdc = { resource = "...", profile = "scpi-supply" }   # the supply driving the source

    [noise_source]
    enr_file = "enr/ns-0417.toml"    # our ENR format, or a plain two-column table, or the
                                     # name of a shipped table ("ns-0417": the demo's)
    drive_voltage = "28 V"           # the source's drive (the common 28 V)
    supply_limit = "29 V"            # the drive supply's voltage limit (never below the drive)
    current_limit = "80 mA"          # the drive supply's current limit
    cold_temperature = "ambient"     # or a stated temperature, e.g. "296.5 K" / "23.4 degC"
    room_temperature = "23 degC"     # without a chamber: the room's temperature for "ambient"

For a plain two-column ENR table the source's identity comes from here: ``serial``,
``calibrated``, ``expires`` (TOML dates), ``enr_uncertainty`` (k = 2) and
``enr_frequency_unit`` (Hz, kHz, MHz or GHz).

Or the analyzer's own noise-source output drives it (``drive = "sa"``; the analyzer's profile
needs a ``noise_source`` operation, e.g. ``profile = "scpi-analyzer-ns"``): then no ``nsdc``
role, and the drive keys are not used. Either way the run reads the drive back after each
switch, and the safe state switches it off and reads that back.

Cold temperature: the noise source's off state is a matched load at its physical temperature.
``"ambient"`` (the default) takes the measured room temperature: ``room_temperature`` (a room
thermometer's reading) when stated, else the chamber probe read when the run is set up, before
any conditioning.
Caution: the drive is a DC voltage on the source's connector; switch it off before connecting
or disconnecting the source (common practice; follow the source's manual and lab rules).
"""

from __future__ import annotations

from datetime import date
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import BeforeValidator, Field, WithJsonSchema

from sweeprig.errors import InputError
from sweeprig.formats.enr import (
    DEFAULT_ENR_UNCERTAINTY_DB,
    EnrTable,
    import_two_column,
    load_enr_file,
)
from sweeprig.formats.fields import Current, Frozen, LevelDb, Voltage, quantity_parser

_temperature = quantity_parser("temperature")


def shipped_enr_dir() -> Path:
    """The ENR tables shipped with sweeprig (the demo bench's noise source)."""
    root = Path(__file__).resolve().parents[1]
    packaged = root / "_sequences" / "benches" / "enr"
    return packaged if packaged.is_dir() else root.parent / "sequences" / "benches" / "enr"


def _ambient_or_temperature(value: Any) -> Any:
    if isinstance(value, str) and value.strip().lower() == "ambient":
        return "ambient"
    return _temperature(value)


class NoiseSourceBench(Frozen):
    """The noise source on this bench (see the module docstring)."""

    drive: Literal["nsdc", "sa"] = Field(
        "nsdc", description='what switches the source: "nsdc" (a supply output, role nsdc, '
        'at drive_voltage) or "sa" (the analyzer\'s own noise-source output, its profile\'s '
        "noise_source operation)")
    enr_file: str = Field(min_length=1, description="ENR table: our TOML file or a plain "
                          "two-column table, relative to the bench file")
    drive_voltage: Voltage = Field(28.0, gt=0.0, description="the source's drive voltage")
    supply_limit: Voltage | None = Field(
        None, description="the drive supply's voltage limit (default: the drive voltage)")
    current_limit: Current = Field(0.1, gt=0.0, description="the drive supply's current limit")
    cold_temperature: Annotated[Any, BeforeValidator(_ambient_or_temperature), WithJsonSchema(
        {"anyOf": [{"type": "number"}, {"type": "string"}],
         "description": '"ambient" or a temperature such as "296.5 K"'})] = "ambient"
    room_temperature: Annotated[Any, BeforeValidator(_temperature), WithJsonSchema(
        {"anyOf": [{"type": "number"}, {"type": "string"}],
         "description": "room temperature for an ambient cold temperature without a "
         "chamber"})] = None
    serial: str = Field("", description="two-column tables: the source's serial number")
    calibrated: date | None = Field(None, description="two-column tables: calibration date")
    expires: date | None = Field(None, description="two-column tables: expiry date")
    enr_uncertainty: LevelDb = Field(DEFAULT_ENR_UNCERTAINTY_DB,
                                     description="two-column tables: ENR uncertainty (k = 2)")
    enr_frequency_unit: str = Field("Hz", description="two-column tables: frequency unit")

    @property
    def voltage_limit_v(self) -> float:
        return self.drive_voltage if self.supply_limit is None else self.supply_limit


def check_noise_source(spec: NoiseSourceBench, *, has_drive_role: bool, where: str) -> None:
    """Cross-key checks, before anything is powered: the drive role exists and its limit is
    not below the drive."""
    if spec.drive == "sa":
        if not has_drive_role:
            raise InputError(
                "the noise source is driven by the analyzer's noise-source output, but the "
                "bench has no roles.sa", where=where,
                fix='add roles.sa = { resource = "...", profile = "..." } (a profile with a '
                'noise_source operation), or drive the source from a supply: drive = "nsdc"')
        return
    if not has_drive_role:
        raise InputError(
            "the noise source has no drive supply: roles.nsdc is missing", where=where,
            fix='add roles.nsdc = { resource = "...", profile = "scpi-supply" } for the supply '
            "output that drives the noise source")
    if spec.voltage_limit_v < spec.drive_voltage:
        raise InputError(
            f"the drive supply's limit {spec.voltage_limit_v:g} V is below the noise source's "
            f"drive {spec.drive_voltage:g} V: the source would never turn on",
            where=where, fix="raise supply_limit to the drive voltage (check the source's "
            "rating first) or correct drive_voltage")


def load_enr_for(spec: NoiseSourceBench, base: Path, *, where: str) -> EnrTable:
    """The ENR table a ``[noise_source]`` names: a path relative to ``base``, or a bare name
    (no suffix, no folder) of a table shipped with sweeprig (``sequences/benches/enr``)."""
    name = spec.enr_file
    if "/" not in name and "\\" not in name and not Path(name).suffix:
        shipped = shipped_enr_dir() / f"{name}.toml"
        if not shipped.is_file():
            known = ", ".join(sorted(p.stem for p in shipped_enr_dir().glob("*.toml")))
            raise InputError(f"no shipped ENR table named {name!r}", where=where,
                             fix=f"name one of {known}, or give a file path with its suffix")
        return load_enr_file(shipped)
    path = base / name
    if path.suffix.lower() == ".toml":
        return load_enr_file(path)
    if not spec.serial:
        raise InputError("a plain two-column ENR table needs the source's serial number",
                         where=where, fix='add serial = "..." (and calibrated, expires) to '
                         "[noise_source], or use an ENR file of our TOML format")
    return import_two_column(path, serial=spec.serial, calibrated=spec.calibrated,
                             expires=spec.expires, uncertainty_db=spec.enr_uncertainty,
                             frequency_unit=spec.enr_frequency_unit)
