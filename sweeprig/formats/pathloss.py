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
from sweeprig.files import read_file_bytes
from sweeprig.units import format_frequency, shorten

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


_MISSING_FIX = "paths are relative to the bench file; check the name"


def read_csv_loss(path: Path, *, display: str, where: str) -> TableLoss:
    """Read a CSV loss table: columns ``freq_hz, loss_db``.

    Blank lines and lines starting with ``#`` are skipped anywhere; the first other row may be
    a header (column names, starting with a letter).
    """
    display = shorten(display)
    raw = read_file_bytes(path, what="loss table", display=display, where=where,
                          missing_fix=_MISSING_FIX, expected="a .csv file")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(f"cannot read loss table {display}: {exc}", where=where,
                         fix="save it as a UTF-8 CSV file") from None
    freqs: list[float] = []
    losses: list[float] = []
    rows_seen = 0
    for lineno, row in enumerate(csv.reader(io.StringIO(text)), start=1):
        cells = [c.strip() for c in row]
        if not cells or not any(cells) or cells[0].startswith("#"):
            continue
        rows_seen += 1
        if len(cells) < 2:
            raise InputError(f"row has {len(cells)} column(s), expected 2 (freq_hz, loss_db)",
                             where=f"{display}:{lineno}", fix="write rows like 2.4e9, 3.1")
        try:
            f, loss = float(cells[0]), float(cells[1])
        except ValueError:
            if rows_seen == 1 and cells[0][:1].isalpha():
                continue  # header row (names such as freq_hz, loss_db)
            raise InputError(f"row {[shorten(c) for c in cells[:2]]} is not two numbers",
                             where=f"{display}:{lineno}",
                             fix="write frequency in Hz and loss in dB, e.g. 2.4e9, 3.1",
                             ) from None
        if not (math.isfinite(f) and math.isfinite(loss)) or f < 0:
            raise InputError(f"row {[shorten(c) for c in cells[:2]]} is not a finite, "
                             "non-negative frequency and a finite loss",
                             where=f"{display}:{lineno}", fix="fix the numbers in this row")
        freqs.append(f)
        losses.append(loss)
    if len(freqs) < 2:
        held = "no data rows" if not freqs else "only 1 data row"
        raise InputError(f"loss table {display} has {held}; it needs at least 2 rows",
                         where=where,
                         fix="add rows 'freq_hz, loss_db' covering the frequencies used")
    return _table(np.asarray(freqs), np.asarray(losses), display, where)


#: Numbers on one row of a Touchstone 2-port file (frequency and 4 pairs); noise rows have 5.
_S2P_ROW_NUMBERS = 9


def _touchstone_text(path: Path, display: str, where: str) -> str:
    """The text of a Touchstone file (UTF-8, else Latin-1); refuses missing and empty files."""
    raw = read_file_bytes(path, what="Touchstone file", display=display, where=where,
                          missing_fix=_MISSING_FIX, expected="a .s2p file")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        text = raw.decode("latin-1")
    if not text.strip():
        raise InputError(f"Touchstone file {display} is empty", where=where,
                         fix="give a valid Touchstone .s2p file (an option line '# GHz S DB R 50' "
                         "and rows of frequency and S-parameters)")
    return text


def _check_s2p_frequencies(text: str, display: str, where: str) -> None:
    """Refuse S-parameter rows whose frequencies do not increase (naming the line).

    Only rows of exactly 9 numbers are S-parameter rows of a 2-port; noise-parameter rows
    (5 numbers), which restart from a low frequency, are left alone.
    """
    previous: float | None = None
    for lineno, line in enumerate(text.splitlines(), start=1):
        body = line.split("!", 1)[0].strip()
        if not body or body.startswith(("#", "[")):
            continue
        tokens = body.split()
        if len(tokens) != _S2P_ROW_NUMBERS:
            continue
        try:
            freq = float(tokens[0])
        except ValueError:
            return  # scikit-rf names the problem
        if previous is not None and not freq > previous:
            raise InputError(
                f"{display}:{lineno}: the frequency {shorten(tokens[0])} is not above the one "
                f"before ({previous:g}); Touchstone frequencies must increase",
                where=where,
                fix="list the rows with increasing frequencies, each frequency once",
            )
        previous = freq


def read_touchstone_loss(path: Path, *, display: str, where: str) -> TableLoss:
    """Loss of a two-port from a Touchstone ``.s2p`` file: −20·log10|S21|, via scikit-rf.

    The file is read here (scikit-rf only sees the text); empty files, rows whose frequencies
    do not increase and tables of fewer than 2 frequencies are refused.
    """
    display = shorten(display)
    text = _touchstone_text(path, display, where)
    if path.suffix.lower() == ".s2p":
        _check_s2p_frequencies(text, display, where)
    import warnings

    import skrf

    buffer = io.StringIO(text)
    buffer.name = path.name
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            network = skrf.Network(buffer)
    except Exception as exc:  # scikit-rf raises many kinds on malformed files
        raise InputError(f"cannot read Touchstone file {display}: {shorten(str(exc), 300)}",
                         where=where, fix="give a valid Touchstone .s2p file") from exc
    finally:
        buffer.close()
    if network.nports != 2:
        raise InputError(f"{display} has {network.nports} port(s); a path loss needs a "
                         "two-port (.s2p)", where=where, fix="give a .s2p file")
    freq_hz = np.asarray(network.f, dtype=float)
    if freq_hz.size < 2:
        held = "no data rows" if freq_hz.size == 0 else "only 1 frequency"
        raise InputError(f"Touchstone file {display} has {held}; a loss table needs at least "
                         "2 frequencies", where=where,
                         fix="add rows covering the frequencies the sequence uses")
    if np.any(np.diff(freq_hz) <= 0):
        raise InputError(f"{display}: the frequencies do not increase from row to row",
                         where=where, fix="list the rows with increasing frequencies")
    s21 = np.abs(network.s[:, 1, 0])
    if np.any(s21 <= 0):
        raise InputError(f"{display}: |S21| is zero at some frequency (infinite loss)",
                         where=where, fix="check the file")
    loss = -20.0 * np.log10(s21)
    return _table(freq_hz, loss, display, where)
