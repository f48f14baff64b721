"""Path loss of one bench connection versus frequency: constant, CSV table or Touchstone.

Loss is in dB, positive for attenuation (a cable of "6.2 dB" delivers 6.2 dB less than the
source sets). Tables are interpolated linearly in frequency and never extrapolated: asking
for a frequency outside the table is an :class:`~sweeprig.errors.InputError`.
"""

from __future__ import annotations

import csv
import io
import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from numpy.typing import ArrayLike

from sweeprig.errors import InputError
from sweeprig.files import read_file_bytes, shorten_path
from sweeprig.formats.level_grid import LevelGridLoss
from sweeprig.text import offending_token
from sweeprig.units import format_frequency, shorten

# Relative slack at the table ends, so that 2.5e9 computed as 2.3e9 + 8·25e6 still counts
# as inside a table ending at 2.5 GHz.
_EDGE_RTOL = 1e-9


@dataclass(frozen=True)
class ConstantLoss:
    """The same loss at every frequency."""

    loss: float
    where: str = ""

    def loss_db(self, freq_hz: ArrayLike, level_dbm: ArrayLike | None = None) -> np.ndarray:
        """Loss in dB at each frequency (Hz); the same at every level (``level_dbm``)."""
        shape = np.shape(freq_hz) if level_dbm is None else np.broadcast_shapes(
            np.shape(freq_hz), np.shape(level_dbm))
        return np.full(shape, self.loss, dtype=float)

    def at(self, freq_hz: float, level_dbm: float | None = None) -> float:
        """Loss in dB at one frequency (Hz), at any level."""
        return self.loss

    def estimate_at(self, freq_hz: float, level_dbm: float | None = None) -> float:
        """The loss for a prediction: the same everywhere."""
        return self.at(freq_hz)

    def describe(self) -> str:
        return f"{self.loss:g} dB"


@dataclass(frozen=True)
class TableLoss:
    """Loss from a table of (frequency, loss) rows, linear interpolation, no extrapolation."""

    freq_hz: np.ndarray = field(repr=False)
    loss_table_db: np.ndarray = field(repr=False)
    file: str = ""
    where: str = ""
    fix: str = ""  # what to do when a frequency lies outside the table (default: extend it)

    def loss_db(self, freq_hz: ArrayLike, level_dbm: ArrayLike | None = None) -> np.ndarray:
        """Loss in dB at each frequency (Hz), the same at every level; InputError if any
        frequency lies outside the table."""
        f = np.asarray(freq_hz, dtype=float)
        if level_dbm is not None:
            f = np.broadcast_arrays(f, np.asarray(level_dbm, dtype=float))[0]
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
                    fix=self.fix or "extend the table to cover every frequency the sequence "
                    "uses, or narrow the sweep",
                )
        return np.interp(f, self.freq_hz, self.loss_table_db)

    def at(self, freq_hz: float, level_dbm: float | None = None) -> float:
        return float(self.loss_db(np.asarray([freq_hz]))[0])

    def estimate_at(self, freq_hz: float, level_dbm: float | None = None) -> float:
        """The loss for a prediction (a line the planner expects, not a reading): inside the
        table as :meth:`at`, outside it the nearest end's value (an estimate, never used to
        correct a measured level)."""
        return float(np.interp(float(freq_hz), self.freq_hz, self.loss_table_db))

    def describe(self) -> str:
        return (f"table {self.file} ({format_frequency(self.freq_hz[0])} to "
                f"{format_frequency(self.freq_hz[-1])})")


PathLoss = ConstantLoss | TableLoss | LevelGridLoss


def _table(freq_hz: np.ndarray, loss_db: np.ndarray, file: str, where: str) -> TableLoss:
    order = np.argsort(freq_hz, kind="stable")
    f, loss = freq_hz[order], loss_db[order]
    if np.any(np.diff(f) <= 0):
        raise InputError(f"{file}: two rows have the same frequency", where=where,
                         fix="give each frequency once")
    return TableLoss(freq_hz=f, loss_table_db=loss, file=file, where=where)


_MISSING_FIX = "paths are relative to the bench file; check the name"


def read_csv_loss(path: Path, *, display: str, where: str, allow_gain: bool = False
                  ) -> TableLoss:
    """Read a CSV loss table: columns ``freq_hz, loss_db``.

    Blank lines and lines starting with ``#`` are skipped anywhere; the first other row may be
    a header (column names, starting with a letter). A row showing gain (a loss below
    −:data:`GAIN_TOLERANCE_DB`) is refused unless ``allow_gain`` (an amplifier in the path).
    Messages quote at most one offending cell, cut short: the file may be anything.
    """
    display = shorten_path(display)
    raw = read_file_bytes(path, what="loss table", display=display, where=where,
                          missing_fix=_MISSING_FIX, expected="a .csv file")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw.count(b"\n", 0, exc.start) + 1
        raise InputError(f"{display}:{line}: byte 0x{raw[exc.start]:02X} is not UTF-8 text; a "
                         "loss table is a CSV text file", where=where,
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
            bad = cells[0] if not _is_number(cells[0]) else cells[1]
            column = "frequency" if bad is cells[0] else "loss"
            raise InputError(f"row is not two numbers (freq_hz, loss_db): the {column} "
                             f"{offending_token(bad)} is not a number",
                             where=f"{display}:{lineno}",
                             fix="write frequency in Hz and loss in dB, e.g. 2.4e9, 3.1",
                             ) from None
        if not (math.isfinite(f) and math.isfinite(loss)) or f < 0:
            raise InputError(f"row {[shorten(c, 24) for c in cells[:2]]} is not a finite, "
                             "non-negative frequency and a finite loss",
                             where=f"{display}:{lineno}", fix="fix the numbers in this row")
        if loss < -GAIN_TOLERANCE_DB and not allow_gain:
            raise InputError(_gain_what(loss, f), where=f"{display}:{lineno}",
                             fix=_GAIN_FIX.format(where=where))
        freqs.append(f)
        losses.append(loss)
    if len(freqs) < 2:
        held = "no data rows" if not freqs else "only 1 data row"
        raise InputError(f"loss table {display} has {held}; it needs at least 2 rows",
                         where=where,
                         fix="add rows 'freq_hz, loss_db' covering the frequencies used")
    return _table(np.asarray(freqs), np.asarray(losses), display, where)


#: A table may show this much gain (negative loss) without an amplifier in the path: the
#: measurement noise of a short, nearly lossless cable (common practice, no source).
GAIN_TOLERANCE_DB = 0.1

_GAIN_FIX = ("check the sign (loss is positive for attenuation); if an amplifier is in this "
             "path, add amplifier = true to the table at {where}")


def _gain_what(loss_db: float, freq_hz: float) -> str:
    return (f"the table shows a gain of {-loss_db:.3g} dB at {format_frequency(freq_hz)} "
            f"(a loss of {loss_db:.3g} dB) where a loss is expected; losses must be at least "
            f"{-GAIN_TOLERANCE_DB:g} dB")


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


#: Numbers on one row of a Touchstone 2-port file (frequency and 4 pairs); noise rows have 5.
_S2P_ROW_NUMBERS = 9
_NOISE_ROW_NUMBERS = 5
_PORTS_IN_SUFFIX = re.compile(r"\.s(\d{1,2})p$", re.IGNORECASE)
#: Words an option line may hold (Touchstone 1.1: frequency unit, parameter, format, R n).
_OPTION_WORDS = frozenset({"hz", "khz", "mhz", "ghz", "s", "y", "z", "g", "h", "ma", "db", "ri",
                           "r"})
_TOUCHSTONE_FIX = ("give a valid Touchstone .s2p file (an option line '# GHz S DB R 50' and "
                   "rows of frequency and S-parameters)")


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


def _check_touchstone_shape(text: str, suffix: str, display: str, where: str) -> None:
    """Refuse what is not a Touchstone file before scikit-rf sees it, naming the line.

    Checks the option line's words and that every data row holds only numbers, and, for a
    file named ``.sNp``, that the numbers fit N ports (1 + 2·N² per frequency; for N ≤ 2 one
    row each, 2-port noise rows holding 5). Quotes at most one token, cut short: a file given
    by mistake may hold anything (a key, a password).
    """
    if re.search(r"^\s*\[", text, re.M):  # Touchstone 2.0 keywords: scikit-rf checks those
        return
    match = _PORTS_IN_SUFFIX.search(suffix)
    ports = int(match[1]) if match else None
    per_frequency = 1 + 2 * ports * ports if ports else None
    total = 0
    options_seen = False
    for lineno, line in enumerate(text.splitlines(), start=1):
        body = line.split("!", 1)[0].strip()
        if not body:
            continue
        if body.startswith("#"):
            if options_seen:
                continue  # later option lines are ignored (Touchstone 1.1)
            options_seen = True
            words = body[1:].split()
            for k, word in enumerate(words):
                numeric = k > 0 and words[k - 1].lower() == "r" and _is_number(word)
                if word.lower() not in _OPTION_WORDS and not numeric:
                    raise InputError(
                        f"{display}:{lineno}: {offending_token(word)} is not a word of a "
                        "Touchstone option line (expected e.g. '# GHz S DB R 50')",
                        where=where, fix=_TOUCHSTONE_FIX)
            continue
        tokens = body.split()
        for token in tokens:
            if not _is_number(token):
                raise InputError(
                    f"{display}:{lineno}: {offending_token(token)} is not a number; Touchstone "
                    "data rows hold only numbers (frequency, then S-parameter pairs)",
                    where=where, fix=_TOUCHSTONE_FIX)
        if ports in (1, 2) and len(tokens) != per_frequency and not (
                ports == 2 and len(tokens) == _NOISE_ROW_NUMBERS):
            raise InputError(
                f"{display}:{lineno}: a row of {len(tokens)} numbers in a file named "
                f".s{ports}p, whose rows hold {per_frequency} (frequency and "
                f"{ports * ports} S-parameter pair{'s' if ports > 1 else ''})"
                f"{_fits_ports(text, ports)}",
                where=where,
                fix="give a valid Touchstone two-port file, named for its port count (.s2p)")
        total += len(tokens)
    if per_frequency and ports and ports > 2 and total % per_frequency:
        raise InputError(
            f"{display}: the data holds {total} numbers, not a whole number of frequencies "
            f"of a {ports}-port ({per_frequency} numbers each)",
            where=where, fix="check that the file's name (.sNp) matches its port count")


def _fits_ports(text: str, named: int) -> str:
    """", which fits a 4-port file" when the data's number count fits another port count."""
    total = 0
    for line in text.splitlines():
        body = line.split("!", 1)[0].strip()
        if body and not body.startswith("#"):
            total += len(body.split())
    for ports in range(1, 11):
        if ports != named and total and total % (1 + 2 * ports * ports) == 0:
            first_row = next((len(b.split()) for b in (ln.split("!", 1)[0].strip()
                              for ln in text.splitlines()) if b and not b.startswith("#")), 0)
            if ports > 2 or first_row == 1 + 2 * ports * ports:
                return f"; the data fits a {ports}-port file"
    return ""


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


def read_touchstone_loss(path: Path, *, display: str, where: str, allow_gain: bool = False
                         ) -> TableLoss:
    """Loss of a two-port from a Touchstone ``.s2p`` file: −20·log10|S21|, via scikit-rf.

    The file is read here (scikit-rf only sees the text); empty files, text that is not
    Touchstone, a port count that does not match the name, rows whose frequencies do not
    increase, tables of fewer than 2 frequencies and, unless ``allow_gain`` (an amplifier in
    the path), |S21| above 0 dB (beyond :data:`GAIN_TOLERANCE_DB`) are refused.
    """
    display = shorten_path(display)
    freq_hz, s = read_touchstone_network(path, display=display, where=where)
    return loss_table_from_s(freq_hz, s, display=display, where=where, allow_gain=allow_gain)


def loss_table_from_s(freq_hz: np.ndarray, s: np.ndarray, *, display: str, where: str,
                      allow_gain: bool = False) -> TableLoss:
    """−20·log10|S21| of a two-port's S-parameters (``s``: frequencies × 2 × 2) as a loss
    table; zero |S21| and, unless ``allow_gain``, gain are refused."""
    s21 = np.abs(s[:, 1, 0])
    if np.any(s21 <= 0):
        raise InputError(f"{display}: |S21| is zero at some frequency (infinite loss)",
                         where=where, fix="check the file")
    loss = -20.0 * np.log10(s21)
    gain_at = np.flatnonzero(loss < -GAIN_TOLERANCE_DB)
    if gain_at.size and not allow_gain:
        k = int(gain_at[0])
        raise InputError(f"{display}: |S21| above 0 dB: " + _gain_what(float(loss[k]),
                                                                      float(freq_hz[k])),
                         where=where, fix=_GAIN_FIX.format(where=where))
    return _table(freq_hz, loss, display, where)


def read_touchstone_network(path: Path, *, display: str, where: str
                            ) -> tuple[np.ndarray, np.ndarray]:
    """A two-port Touchstone file's frequencies (Hz) and S-parameters (frequencies × 2 × 2),
    read with scikit-rf after the checks of :func:`read_touchstone_loss`."""
    text = _touchstone_text(path, display, where)
    _check_touchstone_shape(text, path.name, display, where)
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
        # its message may quote the file: say only what kind of problem it found
        raise InputError(f"cannot read Touchstone file {display}: not a valid Touchstone "
                         f"file ({type(exc).__name__} while reading it)",
                         where=where, fix=_TOUCHSTONE_FIX) from exc
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
    return freq_hz, np.asarray(network.s, dtype=complex)
