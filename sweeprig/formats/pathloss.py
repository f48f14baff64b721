"""Path loss of one bench connection versus frequency: constant, CSV table or Touchstone.

Loss is in dB, positive for attenuation (a cable of "6.2 dB" delivers 6.2 dB less than the
source sets). Tables are interpolated linearly in frequency and never extrapolated: asking
for a frequency outside the table is an :class:`~sweeprig.errors.InputError`.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from numpy.typing import ArrayLike

from sweeprig.errors import InputError
from sweeprig.units import format_frequency

# Relative slack at the table ends, so that 2.5e9 computed as 2.3e9 + 8·25e6 still counts
# as inside a table ending at 2.5 GHz.
_EDGE_RTOL = 1e-9


@dataclass(frozen=True)
class ConstantLoss:
    """The same loss at every frequency."""

    loss: float
    where: str = ""

    def loss_db(self, freq_hz: ArrayLike) -> np.ndarray:
        """Loss in dB at each frequency (Hz)."""
        return np.full(np.shape(freq_hz), self.loss, dtype=float)

    def at(self, freq_hz: float) -> float:
        """Loss in dB at one frequency (Hz)."""
        return self.loss

    def describe(self) -> str:
        return f"{self.loss:g} dB"


@dataclass(frozen=True)
class TableLoss:
    """Loss from a table of (frequency, loss) rows, linear interpolation, no extrapolation."""

    freq_hz: np.ndarray = field(repr=False)
    loss_table_db: np.ndarray = field(repr=False)
    file: str = ""
    where: str = ""

    def loss_db(self, freq_hz: ArrayLike) -> np.ndarray:
        """Loss in dB at each frequency (Hz); InputError if any lies outside the table."""
        f = np.asarray(freq_hz, dtype=float)
        if f.size:
            lo, hi = self.freq_hz[0], self.freq_hz[-1]
            below = f < lo * (1 - _EDGE_RTOL)
            above = f > hi * (1 + _EDGE_RTOL)
            if below.any() or above.any():
                bad = float(f[below][0] if below.any() else f[above][0])
                raise InputError(
                    f"path loss needed at {format_frequency(bad)}, outside the table "
                    f"{self.file} ({format_frequency(lo)} to {format_frequency(hi)}); "
                    "sweeprig does not extrapolate loss tables",
                    where=self.where or self.file,
                    fix="extend the table to cover every frequency the sequence uses, or "
                    "narrow the sweep",
                )
        return np.interp(f, self.freq_hz, self.loss_table_db)

    def at(self, freq_hz: float) -> float:
        return float(self.loss_db(np.asarray([freq_hz]))[0])

    def describe(self) -> str:
        return (f"table {self.file} ({format_frequency(self.freq_hz[0])} to "
                f"{format_frequency(self.freq_hz[-1])})")


PathLoss = ConstantLoss | TableLoss


def _table(freq_hz: np.ndarray, loss_db: np.ndarray, file: str, where: str) -> TableLoss:
    order = np.argsort(freq_hz, kind="stable")
    f, loss = freq_hz[order], loss_db[order]
    if np.any(np.diff(f) <= 0):
        raise InputError(f"{file}: two rows have the same frequency", where=where,
                         fix="give each frequency once")
    return TableLoss(freq_hz=f, loss_table_db=loss, file=file, where=where)


def read_csv_loss(path: Path, *, display: str, where: str) -> TableLoss:
    """Read a CSV loss table: columns ``freq_hz, loss_db`` (a header row is optional)."""
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"loss table {display} does not exist", where=where,
                         fix="paths are relative to the bench file; check the name") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read loss table {display}: {exc}", where=where,
                         fix="save it as a UTF-8 CSV file") from None
    freqs: list[float] = []
    losses: list[float] = []
    for lineno, row in enumerate(csv.reader(io.StringIO(text)), start=1):
        cells = [c.strip() for c in row]
        if not cells or not any(cells) or cells[0].startswith("#"):
            continue
        if len(cells) < 2:
            raise InputError(f"row has {len(cells)} column(s), expected 2 (freq_hz, loss_db)",
                             where=f"{display}:{lineno}", fix="write rows like 2.4e9, 3.1")
        try:
            f, loss = float(cells[0]), float(cells[1])
        except ValueError:
            if not freqs and lineno == 1:
                continue  # header row
            raise InputError(f"row {cells[:2]} is not two numbers", where=f"{display}:{lineno}",
                             fix="write frequency in Hz and loss in dB, e.g. 2.4e9, 3.1",
                             ) from None
        if not (math.isfinite(f) and math.isfinite(loss)) or f < 0:
            raise InputError(f"row {cells[:2]} is not a finite, non-negative frequency and "
                             "a finite loss", where=f"{display}:{lineno}",
                             fix="fix the numbers in this row")
        freqs.append(f)
        losses.append(loss)
    if len(freqs) < 2:
        raise InputError(f"loss table {display} needs at least 2 rows", where=where,
                         fix="add rows 'freq_hz, loss_db' covering the frequencies used")
    return _table(np.asarray(freqs), np.asarray(losses), display, where)


def read_touchstone_loss(path: Path, *, display: str, where: str) -> TableLoss:
    """Loss of a two-port from a Touchstone ``.s2p`` file: −20·log10|S21|, via scikit-rf."""
    if not path.is_file():
        raise InputError(f"Touchstone file {display} does not exist", where=where,
                         fix="paths are relative to the bench file; check the name")
    import warnings

    import skrf

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            network = skrf.Network(str(path))
    except Exception as exc:  # scikit-rf raises many kinds on malformed files
        raise InputError(f"cannot read Touchstone file {display}: {exc}", where=where,
                         fix="give a valid Touchstone .s2p file") from exc
    if network.nports != 2:
        raise InputError(f"{display} has {network.nports} port(s); a path loss needs a "
                         "two-port (.s2p)", where=where, fix="give a .s2p file")
    s21 = np.abs(network.s[:, 1, 0])
    if np.any(s21 <= 0):
        raise InputError(f"{display}: |S21| is zero at some frequency (infinite loss)",
                         where=where, fix="check the file")
    loss = -20.0 * np.log10(s21)
    return _table(np.asarray(network.f, dtype=float), loss, display, where)
