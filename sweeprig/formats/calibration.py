"""Calibration files: measured path losses, with when, how, and with which instruments.

A calibration file (TOML, a format of sweeprig's own) replaces the bench file's typed path
losses by measured tables. It says what was measured, when (``created``), until when it may
be used (``expires``), at what room or chamber temperature, with which instruments (each
role's ``*IDN?`` reply, serial number included), how repeatable it was, and carries a SHA-256
of its own text so a damaged or hand-edited file is refused::

    format = "sweeprig-calibration"
    version = 1
    created = 2026-12-02T19:40:00Z
    expires = 2027-01-01T19:40:00Z
    temperature = "23.5 degC"
    bench = "Simulated bench"
    method = "power meter at the DUT planes, routed by the RF switch"
    repeatability = "0.01 dB"     # standard deviation over repeated calibrations (optional)

    [instruments]                 # role = *IDN? reply when the calibration was made
    rf = "Fictional Labs,SG-1,SN100,1.0"
    pm = "Fictional Labs,PM-1,SN200,1.0"

    [loss.rf]                     # one table per connection, as in the bench's [path_loss]
    freq = [2.0e9, 2.2e9, 2.4e9]  # Hz, ascending
    level = [-30.0, -10.0]        # dBm at the DUT plane, ascending (source connections; optional)
    loss_db = [[3.08, 3.11, 3.17],  # one row per level (without `level`: one flat list,
               [3.02, 3.05, 3.11]]  # the same loss at every level); positive = attenuation

    sha256 = "…"                  # of the file's text without this line (written last)

A run refuses a calibration that is expired or whose instruments answer ``*IDN?`` with a
different maker, model or serial number, unless told to accept it; it never accepts a file
whose checksum does not match. A table never extrapolates: a point outside the calibrated
frequencies, or (for a table with a ``level`` axis) outside its levels, is refused by the
pre-flight check, which names the points (see :class:`~sweeprig.formats.pathloss.TableLoss`
and :class:`~sweeprig.formats.level_grid.LevelGridLoss`). A source's table has a level axis
because a source's level error changes with its setting as well as with frequency; the
output paths' tables have none.
"""

from __future__ import annotations

import math
import os
import re
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Literal

import numpy as np
from pydantic import Field

from sweeprig.errors import InputError
from sweeprig.files import sha256_text
from sweeprig.formats.bench import CONNECTIONS, Bench
from sweeprig.formats.fields import Frozen, LevelDb, LocatedFile, Temperature
from sweeprig.formats.level_grid import LevelGridLoss
from sweeprig.formats.loading import load_document, validate
from sweeprig.formats.pathloss import TableLoss

FORMAT_NAME = "sweeprig-calibration"
#: Connections whose table corrects a level at a DUT input, and those on the output side.
INPUT_CONNECTIONS = ("rf", "rf2", "lo")
OUTPUT_CONNECTIONS = ("if", "rf_port", "lo_port")
_SHA_LINE = re.compile(r'^sha256[ \t]*=[ \t]*"[0-9A-Fa-f]*"[ \t]*(#[^\n]*)?\r?\n?', re.M)

RECALIBRATE = ("make a new calibration of this bench (measure its path losses again), or, "
               "knowing the risk, accept this one with --accept-calibration")


class LossTable(Frozen):
    """A measured loss versus frequency (and level, for a source connection)."""

    freq: tuple[float, ...] = Field(description="frequencies, Hz, ascending")
    level: tuple[float, ...] | None = Field(
        None, description="levels at the DUT plane, dBm, ascending (then loss_db has one row "
        "per level)")
    loss_db: tuple[float, ...] | tuple[tuple[float, ...], ...] = Field(
        description="loss at each frequency, dB (positive = attenuation); with `level`, one "
        "row of them per level")


class CalibrationFile(LocatedFile):
    """A whole calibration file (see the module docstring)."""

    format: Literal["sweeprig-calibration"] = Field(description="always "
                                                    '"sweeprig-calibration"')
    version: Literal[1] = Field(description="version of this format")
    created: datetime = Field(description="when the calibration was made (UTC)")
    expires: datetime = Field(description="after this the calibration is refused (UTC)")
    temperature: Temperature = Field(description="room or chamber temperature during it")
    bench: str = Field("", description="name of the bench it was made on")
    method: str = Field("", description="how it was measured, in words")
    repeatability: LevelDb | None = Field(
        None, description="standard deviation over repeated calibrations, dB")
    instruments: dict[str, str] = Field(default_factory=dict,
                                        description="role → *IDN? reply when it was made")
    loss: dict[str, LossTable] = Field(default_factory=dict,
                                       description="connection → measured loss table")
    sha256: str = Field(description="SHA-256 of the file's text without the sha256 line")


@dataclass(frozen=True)
class Calibration:
    """A loaded, checked calibration: the model, its text (stored with a run) and where it
    was read from."""

    model: CalibrationFile
    text: str
    path: str

    @property
    def input_calibrated(self) -> bool:
        return any(c in self.model.loss for c in INPUT_CONNECTIONS)

    @property
    def output_calibrated(self) -> bool:
        return any(c in self.model.loss for c in OUTPUT_CONNECTIONS)

    def table(self, connection: str) -> TableLoss | LevelGridLoss:
        """The measured loss of ``connection`` as a path loss (no extrapolation)."""
        t = self.model.loss[connection]
        where = self.model.where(("loss", connection))
        if t.level is not None:
            return LevelGridLoss(
                np.asarray(t.freq, dtype=float), np.asarray(t.level, dtype=float),
                np.asarray(t.loss_db, dtype=float), file=self.path, where=where,
                fix="calibrate again over every frequency and level the sequence uses (the "
                "calibration never extrapolates; `sweeprig calibrate` measures the levels "
                "the sequence needs, or the grid --levels gives), or narrow the sweep")
        return TableLoss(np.asarray(t.freq, dtype=float), np.asarray(t.loss_db, dtype=float),
                         file=self.path, where=where,
                         fix="calibrate again over every frequency the sequence uses (the "
                         "calibration never extrapolates), or narrow the sweep")

    def describe(self) -> str:
        m = self.model
        def table(name: str) -> str:
            levels = m.loss[name].level
            if not levels:
                return name
            if len(levels) == 1:
                return f"{name} (at {levels[0]:g} dBm)"
            return f"{name} ({len(levels)} levels, {levels[0]:g} to {levels[-1]:g} dBm)"

        return (f"calibration {self.path}: made {m.created:%Y-%m-%d %H:%M} UTC at "
                f"{m.temperature:g} degC, expires {m.expires:%Y-%m-%d %H:%M} UTC; tables "
                + ", ".join(table(n) for n in sorted(m.loss)))


def text_sha256(text: str) -> str:
    """The checksum a calibration file carries: SHA-256 of its text with the sha256 line
    removed (UTF-8)."""
    return sha256_text(_SHA_LINE.sub("", text))


def _utc(moment: datetime) -> datetime:
    return moment.replace(tzinfo=UTC) if moment.tzinfo is None else moment.astimezone(UTC)


def load_calibration(path: str | os.PathLike[str]) -> Calibration:
    """Read and check a calibration file: its format, its tables and its checksum. Raises a
    located :class:`~sweeprig.errors.InputError` (file:line: key) for any problem."""
    doc = load_document(path)
    model = validate(CalibrationFile, doc)
    model._where = doc.where
    model._source = doc.display
    text = Path(path).read_text(encoding="utf-8")
    if text_sha256(text) != model.sha256:
        raise InputError(
            "the calibration file's checksum does not match its text: it was changed or "
            "damaged after it was written, so its corrections cannot be trusted",
            where=model.where(("sha256",)),
            fix="make a new calibration of this bench; never edit one by hand")
    if _utc(model.expires) <= _utc(model.created):
        raise InputError("the calibration expires before it was made",
                         where=model.where(("expires",)), fix="make a new calibration")
    for connection, table in model.loss.items():
        where = model.where(("loss", connection))
        if connection not in CONNECTIONS:
            raise InputError(f"{connection!r} is not a bench connection", where=where,
                             fix="name one of " + ", ".join(CONNECTIONS))
        freq = np.asarray(table.freq, dtype=float)
        _check_shape(table, connection, where)
        loss = np.asarray(table.loss_db, dtype=float)
        if freq.size == 0 or loss.shape[-1] != freq.size:
            raise InputError(f"the table has {freq.size} frequencies and {loss.shape[-1]} "
                             "losses (in a row)",
                             where=where, fix="give one loss per frequency (at least one)")
        if not (np.isfinite(freq).all() and np.isfinite(loss).all()):
            raise InputError("the table holds a value that is not a finite number (NaN or "
                             "infinite): the measurement behind it failed", where=where,
                             fix="make a new calibration")
        if (freq <= 0).any() or (np.diff(freq) <= 0).any():
            raise InputError("the frequencies are not positive and strictly ascending",
                             where=where, fix="make a new calibration")
    return Calibration(model, text, doc.display)


def _check_shape(table: LossTable, connection: str, where: str) -> None:
    """A table with a ``level`` axis: a source connection, levels finite and ascending, one
    row of losses per level; without one: one flat list of losses."""
    nested = bool(table.loss_db) and isinstance(table.loss_db[0], tuple)
    if table.level is None:
        if nested:
            raise InputError("loss_db holds rows (one per level) but the table has no level "
                             "axis", where=where, fix="make a new calibration")
        return
    if connection not in INPUT_CONNECTIONS:
        raise InputError(f"{connection!r} is an output path: its table has no level axis",
                         where=where, fix="make a new calibration")
    levels = np.asarray(table.level, dtype=float)
    if levels.size == 0 or not np.isfinite(levels).all() or (np.diff(levels) <= 0).any():
        raise InputError("the levels are not finite and strictly ascending", where=where,
                         fix="make a new calibration")
    rows = table.loss_db
    if not nested or len(rows) != levels.size or len({len(r) for r in rows}) != 1:  # type: ignore[arg-type]
        raise InputError(f"the table has {levels.size} levels but loss_db is not one row of "
                         "losses per level, all of one length", where=where,
                         fix="make a new calibration")


def check_calibration_age(calibration: Calibration, now: datetime, *,
                          accept: bool = False) -> str | None:
    """Refuse an expired calibration (unless ``accept``; then a warning text is returned)."""
    m = calibration.model
    expires = _utc(m.expires)
    if _utc(now) < expires:
        return None
    text = (f"the calibration expired on {expires:%Y-%m-%d %H:%M} UTC (made "
            f"{_utc(m.created):%Y-%m-%d %H:%M} UTC)")
    if accept:
        return text + "; accepted by --accept-calibration"
    raise InputError(text, where=m.where(("expires",)), fix=RECALIBRATE)


def identity(idn: str) -> tuple[str, str, str]:
    """(maker, model, serial) of an IEEE 488.2 ``*IDN?`` reply (firmware left out)."""
    fields = [f.strip() for f in idn.split(",")]
    fields += [""] * (4 - len(fields))
    return fields[0], fields[1], fields[2]


def instrument_differences(calibration: Calibration, idns: Mapping[str, str]) -> list[str]:
    """Roles present both in the calibration and in ``idns`` whose maker, model or serial
    number differ, in words."""
    out: list[str] = []
    for role, then in sorted(calibration.model.instruments.items()):
        now = idns.get(role)
        if now is None:
            continue
        if identity(then) != identity(now):
            out.append(f"{role}: calibrated with {then.strip()!r}, now {now.strip()!r}")
    return out


def check_calibration_instruments(calibration: Calibration, idns: Mapping[str, str], *,
                                  accept: bool = False) -> str | None:
    """Refuse a calibration made with other instruments (unless ``accept``; then a warning
    text is returned). Checked before any output is enabled."""
    differences = instrument_differences(calibration, idns)
    if not differences:
        return None
    text = ("the calibration was made with different instruments: " + "; ".join(differences))
    if accept:
        return text + "; accepted by --accept-calibration"
    raise InputError(text, where=calibration.model.where(("instruments",)), fix=RECALIBRATE)


def apply_calibration(bench: Bench, calibration: Calibration) -> None:
    """Use the calibration's measured tables in place of the bench's typed path losses."""
    for connection in calibration.model.loss:
        bench._losses[connection] = calibration.table(connection)


def calibration_text(*, created: datetime, expires: datetime, temperature_c: float,
                     bench: str, method: str, instruments: Mapping[str, str],
                     tables: Mapping[str, tuple[list[float], list[float]]],
                     repeatability_db: float | None = None,
                     levels: Mapping[str, tuple[list[float], list[list[float]]]] | None = None
                     ) -> str:
    """A calibration file's text, checksum included (what ``sweeprig calibrate`` writes).
    ``levels``: per source connection, (levels in dBm at the DUT plane, one row of losses
    per level): its table is written over frequency and level (its entry in ``tables``
    gives the frequencies)."""
    def q(value: str) -> str:
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'

    def number(value: float) -> str:
        if not math.isfinite(value):
            raise ValueError(f"{value} is not a finite number")
        return repr(float(value))

    lines = [
        "# sweeprig calibration: measured path losses of a bench (do not edit: the sha256",
        "# line below guards the text)",
        f"format = {q(FORMAT_NAME)}",
        "version = 1",
        f"created = {_utc(created):%Y-%m-%dT%H:%M:%SZ}",
        f"expires = {_utc(expires):%Y-%m-%dT%H:%M:%SZ}",
        f'temperature = "{temperature_c:g} degC"',
        f"bench = {q(bench)}",
        f"method = {q(method)}",
    ]
    if repeatability_db is not None:
        lines.append(f'repeatability = "{repeatability_db:.4g} dB"')
    lines += ["", "[instruments]"]
    lines += [f"{role} = {q(idn)}" for role, idn in sorted(instruments.items())]
    for connection, (freq, loss) in tables.items():
        lines += ["", f"[loss.{connection}]",
                  "freq = [" + ", ".join(number(f) for f in freq) + "]"]
        if levels and connection in levels:
            grid, rows = levels[connection]
            lines += ["level = [" + ", ".join(number(p) for p in grid) + "]",
                      "loss_db = ["]
            lines += ["  [" + ", ".join(number(v) for v in row) + "]," for row in rows]
            lines += ["]"]
        else:
            lines += ["loss_db = [" + ", ".join(number(v) for v in loss) + "]"]
    body = "\n".join(lines) + "\n"
    return body.replace("\n[instruments]\n", f'\nsha256 = "{text_sha256(body)}"\n'
                        "[instruments]\n", 1)
