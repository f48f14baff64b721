"""The one place where sweeprig opens a file it was asked to read.

Sequence, bench, part, simulated-bench, driver-profile and path-loss files all come through
:func:`read_file_bytes`, which reads only what a text file can be:

* a regular file: directories, FIFOs, sockets and devices (``/dev/zero``) are refused by name,
  checked with ``os.stat`` before opening and again on the open descriptor (the name cannot be
  swapped in between), and opened with ``O_NONBLOCK`` so that no FIFO can hang the process;
* reachable: a symlink loop or a name no file system can hold is a located error;
* small: at most :func:`max_file_bytes` bytes (``SWEEPRIG_MAX_FILE_BYTES``; by default 16 MiB
  for data tables, and 2 MiB for TOML files, which Python's parser reads at about 1 s per MB
  at worst: a sequence of 2,000 studies is 0.3 MB), and never more than that plus one byte is
  read, so a file that grows while read (or lies about its size) cannot exhaust memory.

Every refusal is an :class:`~sweeprig.errors.InputError` naming the file and the fix.
"""

from __future__ import annotations

import errno
import hashlib
import os
import stat
from dataclasses import dataclass
from pathlib import Path

from sweeprig.errors import InputError
from sweeprig.text import escape_controls
from sweeprig.units import shorten

#: The environment variable that sets the size cap, in bytes.
MAX_FILE_BYTES_ENV = "SWEEPRIG_MAX_FILE_BYTES"
#: The default size cap: 16 MiB (a Touchstone file of 100,000 frequencies is about 10 MB).
DEFAULT_MAX_FILE_BYTES = 16 * 1024 * 1024
#: The default size cap of TOML files: 2 MiB (a sequence of 2,000 studies is 0.3 MB).
DEFAULT_MAX_TOML_BYTES = 2 * 1024 * 1024
_CHUNK = 1024 * 1024


def max_file_bytes(*, toml: bool = False) -> int:
    """The size cap in bytes: ``SWEEPRIG_MAX_FILE_BYTES`` when set to a positive whole number,
    else the default for data tables or (``toml``) for TOML files."""
    raw = os.environ.get(MAX_FILE_BYTES_ENV, "").strip()
    if not raw:
        return DEFAULT_MAX_TOML_BYTES if toml else DEFAULT_MAX_FILE_BYTES
    try:
        value = int(raw)
    except ValueError:
        value = 0
    if value <= 0:
        raise InputError(
            f"{MAX_FILE_BYTES_ENV}={shorten(escape_controls(raw), 40)} is not a positive "
            "whole number of bytes",
            where=MAX_FILE_BYTES_ENV,
            fix=f"set it to e.g. {DEFAULT_MAX_FILE_BYTES} (bytes), or unset it for the defaults")
    return value


def shorten_path(text: str, limit: int = 160) -> str:
    """A long path cut in its middle (its start and its file name stay), with its length."""
    if len(text) <= limit:
        return text
    head, tail = limit // 3, limit - limit // 3
    return f"{text[:head]}…{text[-tail:]} ({len(text):,} characters)"


def _kind_of(mode: int) -> str | None:
    """What a non-regular file is, in words (None for a regular file)."""
    if stat.S_ISREG(mode):
        return None
    if stat.S_ISDIR(mode):
        return "a directory"
    if stat.S_ISFIFO(mode):
        return "a FIFO (named pipe)"
    if stat.S_ISSOCK(mode):
        return "a socket"
    if stat.S_ISCHR(mode):
        return "a character device"
    if stat.S_ISBLK(mode):
        return "a block device"
    return "not a regular file"


def _size_text(size: int) -> str:
    if size >= 1024 * 1024:
        return f"{size / (1024 * 1024):,.1f} MiB"
    return f"{size:,} bytes"


def read_file_bytes(path: str | os.PathLike[str], *, what: str = "file",
                    display: str | None = None, where: str | None = None,
                    missing_fix: str = "check the path (relative paths start at the working "
                    "directory)", expected: str = "the file itself", toml: bool = False) -> bytes:
    """The bytes of the regular file ``path``, refusing anything else (see the module doc).

    ``what`` names the file's role in messages ("sequence file", "loss table"); ``display``
    is the name shown (default: ``path``); ``where`` the place named (default: ``display``);
    ``missing_fix`` the fix offered when the file does not exist; ``expected`` what to give
    instead of a directory ("a .toml file"); ``toml``: the cap of TOML files applies.
    """
    shown = escape_controls(shorten_path(display if display is not None else os.fspath(path)))
    place = where or shown
    cap = max_file_bytes(toml=toml)

    # where already names the file itself: say "the file" rather than its name twice
    refuse = _Refusal(f"the {what}" if where is None else f"{what} {shown}", place, expected)

    try:
        before = os.stat(path)
        kind = _kind_of(before.st_mode)
        if kind is not None:
            raise _not_regular(refuse, kind)
        if before.st_size > cap:
            raise _too_big(refuse, before.st_size, cap)
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOCTTY", 0)
                     | getattr(os, "O_BINARY", 0))
    except ValueError:  # a NUL character in the name
        raise refuse("has a name no file can have (it holds a NUL character)",
                     missing_fix) from None
    except OSError as exc:
        raise _os_error(refuse, exc, missing_fix) from None
    try:
        opened = os.fstat(fd)
        kind = _kind_of(opened.st_mode)
        if kind is not None:  # swapped for something else between the stat and the open
            raise _not_regular(refuse, kind)
        chunks: list[bytes] = []
        total = 0
        while total <= cap:
            chunk = os.read(fd, min(_CHUNK, cap + 1 - total))
            if not chunk:
                break
            chunks.append(chunk)
            total += len(chunk)
        if total > cap:
            raise _too_big(refuse, None, cap)
        return b"".join(chunks)
    except OSError as exc:
        raise _os_error(refuse, exc, missing_fix) from None
    finally:
        os.close(fd)


@dataclass(frozen=True)
class _Refusal:
    """Builds the error about one file: ``<what> <name> <problem>`` at ``where``."""

    subject: str
    where: str
    expected: str

    def __call__(self, problem: str, fix: str) -> InputError:
        return InputError(f"{self.subject} {problem}", where=self.where, fix=fix)


def _not_regular(refuse: _Refusal, kind: str) -> InputError:
    fix = (f"give the path of {refuse.expected}" if kind == "a directory" else
           "give a regular file: sweeprig reads no pipes, sockets or devices (copy the content "
           "to a file first)")
    return refuse(f"is {kind}, not a regular file", fix)


def _too_big(refuse: _Refusal, size: int | None, cap: int) -> InputError:
    held = f"holds {_size_text(size)}" if size is not None else f"holds more than {_size_text(cap)}"
    return refuse(
        f"{held}, above the limit of {_size_text(cap)}",
        f"check that this is the right file; for a file this large set {MAX_FILE_BYTES_ENV} "
        "to a higher number of bytes")


def _os_error(refuse: _Refusal, exc: OSError, missing_fix: str) -> InputError:
    code = exc.errno
    error: InputError
    if isinstance(exc, FileNotFoundError):
        error = refuse("does not exist", missing_fix)
    elif code == errno.ELOOP:
        error = refuse("is a symbolic link that leads back to itself (a symlink loop)",
                       "point the link at a real file, or give the file's own path")
    elif code == errno.ENAMETOOLONG:
        error = refuse("has a name longer than the file system allows", missing_fix)
    elif code == errno.ENOTDIR:
        error = refuse("does not exist (a part of its path is a file, not a folder)",
                       missing_fix)
    elif isinstance(exc, IsADirectoryError):
        error = refuse("is a directory, not a regular file", f"give the path of {refuse.expected}")
    elif isinstance(exc, PermissionError):
        error = refuse("cannot be read: permission denied", "check the file's permissions")
    else:
        reason = exc.strerror or type(exc).__name__
        error = refuse(f"cannot be read: {shorten(escape_controls(reason), 80)}",
                       "check the file and its permissions")
    return error


def read_file_text(path: str | os.PathLike[str], *, what: str = "file") -> str:
    """The text of the regular file ``path`` as ``Path.read_text`` gives it (UTF-8, line
    endings made ``\n``), read through :func:`read_file_bytes`. A problem opening it is an
    :class:`InputError`; bytes that are not UTF-8 a ``UnicodeDecodeError``."""
    raw = read_file_bytes(path, what=what, toml=True)
    return raw.decode("utf-8").replace("\r\n", "\n").replace("\r", "\n")


def sha256_text(text: str) -> str:
    """SHA-256 of ``text`` encoded as UTF-8, hex: the one checksum of a file's text."""
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def is_symlink_loop(path: Path) -> bool:
    """True when ``path`` is a chain of symbolic links that never reaches a file."""
    try:
        os.stat(path)
    except OSError as exc:
        return exc.errno == errno.ELOOP
    except ValueError:
        return False
    return False


def replace_text(path: Path, text: str) -> None:
    """Write ``text`` (UTF-8) to ``path`` whole: a temporary file beside it, renamed over it,
    so a reader never sees half a file and a failure leaves the old one. Raises
    :class:`InputError` when the folder does not exist."""
    import tempfile

    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise InputError(f"folder {escape_controls(str(folder))} does not exist",
                         where=str(path), fix="create the folder first or write elsewhere")
    fd, tmp = tempfile.mkstemp(prefix=".sweeprig-", suffix=".tmp", dir=folder)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as out:
            out.write(text)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
