"""ENR tables: a noise source's excess noise ratio versus frequency, with its identity.

ENR = (T_hot − T0)/T0 in dB, T0 = 290 K (IEEE definition). A noise source comes with a table of
its ENR at stated frequencies from its calibration. sweeprig reads two forms:

Our own TOML file (``*.toml``)::

    format = "sweeprig-enr"
    version = 1
    serial = "NS-0417-0093"          # the noise source's serial number
    calibrated = 2026-06-12          # date of its calibration
    expires = 2027-06-12             # after this date the table is refused
    uncertainty = "0.12 dB"          # ENR expanded uncertainty (k = 2) of every point
    [[points]]
    frequency = "10 MHz"
    enr = "15.32 dB"
    uncertainty = "0.15 dB"          # optional: this point's own (k = 2)

A plain two-column table (any other suffix: ``.csv``, ``.txt``, ``.dat``): one point a line,
frequency then ENR in dB, separated by a comma, semicolon, tab or spaces; ``#`` starts a
comment and a first line that is not numbers is taken as a header. The frequency unit is Hz
unless the bench says otherwise (``enr_frequency_unit``); serial, calibration date, expiry
and uncertainty then come from the bench file's ``[noise_source]`` table.

Checks: at least one point, frequencies positive and strictly rising, ENR finite; at plan time
the table must cover every frequency the measurement uses (never extrapolated) and must not
have expired.
"""

from __future__ import annotations

import itertools
import math
import os
import re
from dataclasses import dataclass
from datetime import date
from pathlib import Path
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray
from pydantic import Field

from sweeprig.errors import InputError
from sweeprig.formats.fields import Frequency, Frozen, LevelDb, LocatedFile
from sweeprig.formats.loading import display_path, load_document, read_text, validate

FORMAT_NAME = "sweeprig-enr"
#: ENR expanded uncertainty (k = 2) assumed when a plain table states none, dB: a typical
#: figure of a calibrated diode source (common practice, no source).
DEFAULT_ENR_UNCERTAINTY_DB = 0.2
_FREQ_UNITS = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
_SPLIT = re.compile(r"[,;\t ]+")


class EnrPoint(Frozen):
    """One calibrated point."""

    frequency: Frequency = Field(description="frequency")
    enr: LevelDb = Field(description="excess noise ratio, dB")
    uncertainty: LevelDb | None = Field(
        None, description="this point's ENR expanded uncertainty (k = 2), dB")


class EnrFile(LocatedFile):
    """A whole ENR file of our format (see the module docstring)."""

    format: Literal["sweeprig-enr"] = Field(description='always "sweeprig-enr"')
    version: Literal[1] = Field(description="version of this format")
    serial: str = Field(min_length=1, description="the noise source's serial number")
    model: str = Field("", description="the noise source's model, free text")
    calibrated: date = Field(description="date of the source's calibration")
    expires: date = Field(description="after this date the table is refused")
    uncertainty: LevelDb = Field(DEFAULT_ENR_UNCERTAINTY_DB,
                                 description="ENR expanded uncertainty (k = 2) of every point")
    points: tuple[EnrPoint, ...] = Field(description="the calibrated points, frequency rising")


@dataclass(frozen=True)
class EnrTable:
    """A checked ENR table: frequencies (Hz, rising), ENR (dB), per-point expanded
    uncertainty (k = 2, dB), the source's serial, calibration date and expiry, and where it
    was read (for messages)."""

    freq_hz: tuple[float, ...]
    enr_db: tuple[float, ...]
    uncertainty_db: tuple[float, ...]
    serial: str
    calibrated: date | None
    expires: date | None
    source: str

    def enr_at(self, freq_hz: ArrayLike) -> NDArray[np.float64]:
        """ENR at ``freq_hz``, dB: linear in dB between points (the caller has checked
        coverage with :meth:`check_covers`)."""
        return np.interp(np.asarray(freq_hz, dtype=float), self.freq_hz, self.enr_db)

    def uncertainty_at(self, freq_hz: ArrayLike) -> NDArray[np.float64]:
        """ENR expanded uncertainty (k = 2) at ``freq_hz``, dB (the larger neighbour)."""
        f = np.atleast_1d(np.asarray(freq_hz, dtype=float))
        xs = np.asarray(self.freq_hz)
        u = np.asarray(self.uncertainty_db)
        hi = np.clip(np.searchsorted(xs, f, side="left"), 0, len(xs) - 1)
        lo = np.clip(hi - 1, 0, len(xs) - 1)
        exact = np.isclose(xs[hi], f, rtol=0, atol=1e-3)
        return np.where(exact, u[hi], np.maximum(u[lo], u[hi]))

    def check_covers(self, freqs_hz: ArrayLike, *, where: str, what: str) -> None:
        """Refuse frequencies outside the table (an ENR is never extrapolated)."""
        f = np.asarray(freqs_hz, dtype=float)
        lo, hi = self.freq_hz[0], self.freq_hz[-1]
        out = f[(f < lo - 1e-3) | (f > hi + 1e-3)]
        if out.size:
            raise InputError(
                f"the ENR table {self.source} covers {lo / 1e6:g} to {hi / 1e6:g} MHz, but "
                f"{what} needs {float(out.min()) / 1e6:g} MHz" + (
                    f" to {float(out.max()) / 1e6:g} MHz" if out.size > 1 else ""),
                where=where,
                fix="use a noise source (and table) calibrated over the whole band, or narrow "
                "the sweep; an ENR is never extrapolated")

    def check_current(self, today: date, *, where: str) -> None:
        """Refuse an expired table."""
        if self.expires is not None and today > self.expires:
            raise InputError(
                f"the ENR table {self.source} of noise source {self.serial} expired on "
                f"{self.expires.isoformat()} (calibrated "
                f"{self.calibrated.isoformat() if self.calibrated else 'on an unknown date'})",
                where=where,
                fix="have the noise source calibrated again and use its new table")


def _checked(freq: list[float], enr: list[float], where: str,
             lines: list[int] | None = None) -> None:
    if not freq:
        raise InputError("the ENR table has no points", where=where,
                         fix="give at least one frequency and its ENR")
    if not all(math.isfinite(x) for x in (*freq, *enr)):
        raise InputError("the ENR table holds a value that is not a finite number",
                         where=where, fix="correct the table")
    if freq[0] <= 0 or any(b <= a for a, b in itertools.pairwise(freq)):
        bad = next((k for k in range(1, len(freq)) if freq[k] <= freq[k - 1]), 0)
        if lines is not None:
            where = f"{where}:{lines[bad]}"
        raise InputError(
            "the ENR table's frequencies are not positive and strictly rising"
            + (f" (point {bad + 1}: {freq[bad]:g} Hz after {freq[bad - 1]:g} Hz)"
               if bad else ""),
            where=where, fix="list the points from the lowest frequency to the highest, "
            "each frequency once")


def load_enr_file(path: str | os.PathLike[str]) -> EnrTable:
    """Read our TOML ENR file; every problem is a located InputError."""
    doc = load_document(path)
    model = validate(EnrFile, doc)
    model._where = doc.where
    where = model.where(("points",))
    freq = [p.frequency for p in model.points]
    enr = [p.enr for p in model.points]
    _checked(freq, enr, where)
    if model.expires <= model.calibrated:
        raise InputError("the ENR table expires before it was calibrated",
                         where=model.where(("expires",)), fix="correct the dates")
    unc = tuple(p.uncertainty if p.uncertainty is not None else model.uncertainty
                for p in model.points)
    return EnrTable(tuple(freq), tuple(enr), unc, model.serial, model.calibrated,
                    model.expires, doc.display)


def import_two_column(
    path: str | os.PathLike[str], *, serial: str, calibrated: date | None,
    expires: date | None, uncertainty_db: float = DEFAULT_ENR_UNCERTAINTY_DB,
    frequency_unit: str = "Hz",
) -> EnrTable:
    """Read a plain two-column table (frequency, ENR dB); see the module docstring."""
    p = Path(path)
    shown = display_path(p)
    scale = _FREQ_UNITS.get(frequency_unit.strip().lower())
    if scale is None:
        raise InputError(f"{frequency_unit!r} is not a frequency unit",
                         where=shown, fix="use Hz, kHz, MHz or GHz")
    text = read_text(p, what="ENR table")
    freq: list[float] = []
    enr: list[float] = []
    numbers: list[int] = []
    for n, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("#", 1)[0].strip()
        if not line:
            continue
        cells = [c for c in _SPLIT.split(line) if c]
        try:
            values = [float(c) for c in cells]
        except ValueError:
            if not freq and n == next(k for k, r in enumerate(text.splitlines(), 1)
                                      if r.split("#", 1)[0].strip()):
                continue  # a header line
            raise InputError(f"{line!r} is not two numbers", where=f"{shown}:{n}",
                             fix="write each point as: frequency, ENR in dB") from None
        if len(values) != 2:
            raise InputError(f"{len(values)} columns where two are expected",
                             where=f"{shown}:{n}", fix="write each point as: frequency, ENR in dB")
        freq.append(values[0] * scale)
        enr.append(values[1])
        numbers.append(n)
    _checked(freq, enr, shown, numbers)
    return EnrTable(tuple(freq), tuple(enr), (uncertainty_db,) * len(freq), serial, calibrated,
                    expires, shown)
