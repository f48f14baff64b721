"""The pyvisa transport: real instruments and the simulated bench over loopback TCP.

``VisaTransport("TCPIP0::127.0.0.1::5025::SOCKET")`` opens the resource through a pyvisa
``ResourceManager`` (``"@py"``, the pure-Python pyvisa-py backend, by default) and applies the
instrument's :class:`~sweeprig.transport.settings.ConnectionSettings` (from its driver
profile): write and read termination, serial line settings on an ``ASRL`` resource, and the
byte order and data type of binary blocks, which pyvisa's own reader
(``query_binary_values``) decodes. Without settings: LF written after every command, LF ends a
reply on raw sockets and serial lines, big-endian ``REAL,32`` blocks. All pyvisa, socket and
decoding errors come out as :class:`TransportError` naming the resource and the command.

Text commands and replies go through the session's VISA library calls (``visalib.write`` and
``visalib.read``, the VISA ``viWrite``/``viRead``) with the resource's own encoding and
terminations: the bytes are those pyvisa's ``write``/``read`` would exchange, without their
per-call layers (a quarter of an exchange's processor time on loopback, the run's points
being mostly short exchanges).

This is the only module in sweeprig that imports pyvisa.
"""

from __future__ import annotations

import threading
import time
from contextlib import ExitStack, suppress
from typing import Any

import numpy as np
import pyvisa
import pyvisa.constants
import pyvisa.errors

from sweeprig.errors import TransportError
from sweeprig.transport.backend import DEFAULT_VISA_LIBRARY, VISA_LIBRARY_ENV
from sweeprig.transport.base import PostedQuery, ReplyTimeout, Transaction, TransactionHook
from sweeprig.transport.resources import visa_spelling
from sweeprig.transport.resync import ResyncFailed, resynchronise
from sweeprig.transport.settings import DEFAULT_CONNECTION, ConnectionSettings, SerialSettings

DEFAULT_TIMEOUT_S = 5.0
#: Bytes asked of the VISA library per read of a text reply (pyvisa's own chunk size); a
#: longer reply is read on in further chunks.
READ_CHUNK_BYTES = 20 * 1024
_MORE_TO_READ = pyvisa.constants.StatusCode.success_max_count_read
#: The marked answer of a resynchronisation gets at least this long, s (an instrument still
#: finishing what timed out answers it only after that; common practice, no source).
RESYNC_MIN_TIMEOUT_S = 1.0

_PYVISA_ERRORS: tuple[type[BaseException], ...] = (
    pyvisa.errors.Error,
    OSError,
    ValueError,
    EOFError,
)


def open_resource_manager(visa_library: str = DEFAULT_VISA_LIBRARY) -> pyvisa.ResourceManager:
    """Open a pyvisa ResourceManager for ``visa_library`` (``"@py"``, ``"@ivi"``, a path).

    A path is loaded and run by pyvisa: callers pass only what the person at the keyboard
    chose (see :mod:`sweeprig.transport.backend`), never a value read from a file.
    Raises :class:`TransportError` if the VISA library cannot be loaded.
    """
    try:
        return pyvisa.ResourceManager(visa_library)
    except _PYVISA_ERRORS as exc:
        raise TransportError(
            f"cannot load the VISA library {visa_library!r}: {exc}",
            where="VISA library",
            fix='use "@py" (pyvisa-py, installed with sweeprig), "@ivi", or the path of an '
            f"installed VISA library (with --visa-library or {VISA_LIBRARY_ENV})",
        ) from exc


def list_resources(
    visa_library: str = DEFAULT_VISA_LIBRARY,
    *,
    resource_manager: pyvisa.ResourceManager | None = None,
) -> list[str]:
    """VISA resources the library can discover (pyvisa-py does not discover raw TCP sockets)."""
    rm = resource_manager or open_resource_manager(visa_library)
    try:
        return sorted(rm.list_resources())
    except _PYVISA_ERRORS as exc:
        raise TransportError(
            f"listing VISA resources failed: {exc}",
            where=f"VISA library {visa_library!r}",
            fix="name the instruments with --resource instead",
        ) from exc
    finally:
        if resource_manager is None:
            _quiet_close(rm)


# pyvisa hands out one ResourceManager per VISA library to the whole process: closing it
# closes every session opened through it, other transports' included. So a transport only
# closes the manager when it is the last one using it.
_RM_USERS: dict[int, int] = {}
_RM_LOCK = threading.Lock()


def _take_rm(visa_library: str) -> pyvisa.ResourceManager:
    rm = open_resource_manager(visa_library)
    with _RM_LOCK:
        _RM_USERS[id(rm)] = _RM_USERS.get(id(rm), 0) + 1
    return rm


def _release_rm(rm: pyvisa.ResourceManager) -> None:
    with _RM_LOCK:
        users = _RM_USERS.get(id(rm), 1) - 1
        if users > 0:
            _RM_USERS[id(rm)] = users
            return
        _RM_USERS.pop(id(rm), None)
    _quiet_close(rm)


def _quiet_close(obj: Any) -> None:
    with suppress(_PYVISA_ERRORS):
        obj.close()


def _is_socket(resource: str) -> bool:
    return resource.strip().upper().endswith("::SOCKET")


class VisaTransport:
    """A :class:`~sweeprig.transport.base.Transport` over pyvisa.

    ``resource``: VISA resource string, e.g. ``"TCPIP0::lab-sg6.local::5025::SOCKET"`` or
    ``"GPIB0::18::INSTR"``. ``visa_library``: the pyvisa backend (``"@py"`` by default).
    ``timeout_s``: I/O timeout, s. ``resource_manager``: share one ResourceManager among
    several transports (it is then not closed by :meth:`close`). ``on_transaction``: called
    after every exchange with a :class:`Transaction` (the bus log).

    The connection is opened in the constructor; failure raises :class:`TransportError`.
    """

    def __init__(
        self,
        resource: str,
        *,
        visa_library: str = DEFAULT_VISA_LIBRARY,
        timeout_s: float = DEFAULT_TIMEOUT_S,
        resource_manager: pyvisa.ResourceManager | None = None,
        on_transaction: TransactionHook | None = None,
        settings: ConnectionSettings | None = None,
    ) -> None:
        if not isinstance(resource, str) or not resource.strip():
            raise TransportError(
                f"{resource!r} is not a VISA resource string",
                where="resource",
                fix='write it like "TCPIP0::127.0.0.1::5025::SOCKET" or "GPIB0::18::INSTR"',
            )
        if not timeout_s > 0:
            raise TransportError(
                f"timeout {timeout_s!r} s is not positive",
                where=resource,
                fix="give a timeout such as 5 s",
            )
        self.resource = resource
        self.visa_library = visa_library
        self.timeout_s = float(timeout_s)
        self.on_transaction = on_transaction
        self.settings = settings or DEFAULT_CONNECTION
        self._shared_rm = resource_manager
        self._rm: pyvisa.ResourceManager | None = resource_manager
        self._inst: Any = None
        #: queries posted (:meth:`post`) whose replies are not read yet, oldest first
        self._unread: list[PostedQuery] = []
        #: the timeout last set on the open resource, ms (None: not known)
        self._timeout_ms: int | None = None
        #: the open session's VISA library and session, its text encoding and terminations
        #: (the text exchanges call the library's read and write themselves: see
        #: :meth:`_write_text`), and what is undone at its close
        self._lib: Any = None
        self._session: Any = None
        self._encoding = "ascii"
        self._write_term = ""
        self._read_term = ""
        self._session_stack = ExitStack()
        try:
            self._open()
        except BaseException:
            self.close()  # give the ResourceManager back
            raise

    # -- connection -------------------------------------------------------------------------

    def _open(self) -> None:
        if self._rm is None:
            self._rm = _take_rm(self.visa_library)
        try:
            inst = self._rm.open_resource(
                visa_spelling(self.resource), open_timeout=int(self.timeout_s * 1000)
            )
        except _PYVISA_ERRORS as exc:
            raise TransportError(
                f"cannot open the connection: {_describe(exc)}",
                where=self.resource,
                fix="check that the instrument is on and reachable and that the resource string "
                "is right (for the simulated bench: that it is running and the port is its port)",
            ) from exc
        self._timeout_ms = None
        try:
            inst.timeout = int(self.timeout_s * 1000)
            inst.write_termination = self.settings.write_termination
            read_termination = self.settings.read_termination_for(self.resource)
            if read_termination is not None:
                inst.read_termination = read_termination
            if self.settings.serial is not None and _is_serial(self.resource):
                _apply_serial(inst, self.settings.serial)
        except _PYVISA_ERRORS as exc:
            _quiet_close(inst)
            raise TransportError(
                f"cannot configure the connection: {_describe(exc)}",
                where=self.resource,
            ) from exc
        self._inst = inst
        self._timeout_ms = int(self.timeout_s * 1000)
        self._lib, self._session = inst.visalib, inst.session
        self._encoding = inst.encoding
        self._write_term = inst.write_termination or ""
        self._read_term = inst.read_termination or ""
        # a text reply longer than one chunk is read on (:meth:`_read_text`), as pyvisa's
        # own read does: the "more to read" status is not a warning for this session
        self._session_stack.enter_context(inst.ignore_warning(_MORE_TO_READ))

    def _close_session(self) -> None:
        self._session_stack.close()
        self._session_stack = ExitStack()
        self._lib = self._session = None
        if self._inst is not None:
            _quiet_close(self._inst)
            self._inst = None

    def close(self) -> None:
        """Close the connection (and the ResourceManager unless it was shared). Idempotent."""
        self._close_session()
        if self._shared_rm is None and self._rm is not None:
            _release_rm(self._rm)
            self._rm = None

    def reconnect(self) -> None:
        """Close the resource and open it again (keeps the ResourceManager)."""
        self._unread.clear()  # a new connection owes no replies
        self._close_session()
        self._open()

    def __enter__(self) -> VisaTransport:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # -- exchanges --------------------------------------------------------------------------

    def _instrument(self, cmd: str, *, after: list[PostedQuery] | None = None) -> Any:
        """The open resource, with every posted reply read first (unless ``after`` is the
        list of unread ones: another posted query may follow them)."""
        if self._inst is None:
            raise TransportError(
                f"connection is closed (command {cmd!r})",
                where=self.resource,
                fix="reconnect before sending",
            )
        if self._unread and after is not self._unread:
            self._read_unread()
        return self._inst

    def _read_unread(self) -> None:
        """Read the replies of posted queries nobody collected (a fault cut the collection
        short), logging them as discarded: the next exchange then reads its own reply."""
        self._read_until(None, None)

    def _use_timeout(self, timeout_s: float | None) -> None:
        """Give the next exchange ``timeout_s`` (None: the connection's own timeout).

        The resource's timeout is set only when it differs from the one last set (pyvisa sets
        a VISA attribute each time): every exchange states its own, so none inherits
        another's. Anything else that changes the resource's timeout puts it back
        (:class:`_RawVisa`)."""
        ms = int(max(timeout_s, 0.001) * 1000) if timeout_s is not None \
            else int(self.timeout_s * 1000)
        if ms != self._timeout_ms and self._inst is not None:
            self._timeout_ms = None  # unknown if the setting fails
            self._inst.timeout = ms
            self._timeout_ms = ms

    def _write_text(self, cmd: str) -> None:
        """Send ``cmd`` and the write termination, encoded as the session's text: what
        pyvisa's ``write`` sends, through the VISA library's write (the library raises
        ``VisaIOError`` on a failure, as there)."""
        self._lib.write(self._session, (cmd + self._write_term).encode(self._encoding))

    def _read_text(self) -> str:
        """One reply up to the read termination, decoded, the termination removed: what
        pyvisa's ``read`` returns, through the VISA library's read, chunk after chunk while
        it reports more to read (a timeout raises ``VisaIOError`` there, as in pyvisa)."""
        data, status = self._lib.read(self._session, READ_CHUNK_BYTES)
        if status == _MORE_TO_READ:
            chunks = bytearray(data)
            while status == _MORE_TO_READ:
                data, status = self._lib.read(self._session, READ_CHUNK_BYTES)
                chunks.extend(data)
            data = bytes(chunks)
        text: str = data.decode(self._encoding)
        term = self._read_term
        if term and text.endswith(term):
            text = text[:-len(term)]
        return text

    def _record(self, start: float, t0: float, cmd: str, received: str | None) -> None:
        if self.on_transaction is not None:
            self.on_transaction(
                Transaction(start, self.resource, cmd, received, time.perf_counter() - t0)
            )

    def _fail(
        self, start: float, t0: float, cmd: str, exc: BaseException, timeout_s: float | None
    ) -> TransportError:
        error = _translate(exc, self.resource, cmd, timeout_s or self.timeout_s)
        self._record(start, t0, cmd, f"<error: {error.what}>")
        if isinstance(error, ReplyTimeout):
            self._resync_after(error)
        return error

    def _resync_after(self, error: ReplyTimeout) -> None:
        """After a timed-out query: device clear, drain, marked query (never raises)."""
        if self._inst is None:
            return
        start, t0 = time.time(), time.perf_counter()
        try:
            report = resynchronise(_RawVisa(self._inst, self.resource),
                                   timeout_s=max(self.timeout_s, RESYNC_MIN_TIMEOUT_S))
        except (ResyncFailed, *_PYVISA_ERRORS) as exc:
            self._record(start, t0, "<device clear>", f"<error: {_describe(exc)}>")
            return
        error.resynced = True
        error.resync = report.describe()
        self._record(start, t0, "<device clear>", report.describe())

    def clear_device(self) -> str:
        """Device clear, drain and resynchronise (see :mod:`sweeprig.transport.resync`);
        returns what was done. Raises :class:`TransportError` when the instrument does not
        answer the marked query."""
        self._unread.clear()  # the drain below reads whatever is owed
        inst = self._instrument("<device clear>")
        try:
            return resynchronise(_RawVisa(inst, self.resource), timeout_s=max(
                self.timeout_s, RESYNC_MIN_TIMEOUT_S)).describe()
        except (ResyncFailed, *_PYVISA_ERRORS) as exc:
            raise TransportError(
                f"device clear did not bring the instrument back in step: {_describe(exc)}",
                where=self.resource, fix="reconnect, or check the instrument") from exc

    def write(self, cmd: str) -> None:
        """Send ``cmd``."""
        start, t0 = time.time(), time.perf_counter()
        try:
            self._instrument(cmd)
            self._use_timeout(None)
            self._write_text(cmd)
        except TransportError:
            raise
        except _PYVISA_ERRORS as exc:
            raise self._fail(start, t0, cmd, exc, None) from exc
        self._record(start, t0, cmd, None)

    def query(self, cmd: str, *, timeout_s: float | None = None) -> str:
        """Send ``cmd`` and return the reply with its termination removed."""
        start, t0 = time.time(), time.perf_counter()
        try:
            self._instrument(cmd)
            self._use_timeout(timeout_s)
            self._write_text(cmd)
            reply = self._read_text()
        except TransportError:
            raise
        except _PYVISA_ERRORS as exc:
            raise self._fail(start, t0, cmd, exc, timeout_s) from exc
        text = reply.rstrip("\r\n")
        self._record(start, t0, cmd, text)
        return text

    def post(self, cmd: str) -> PostedQuery:
        """Send query ``cmd``; its reply is read by :meth:`collect` (pyvisa's ``query`` is
        the same write followed by the same read). Several may be posted before their
        replies are collected."""
        start, t0 = time.time(), time.perf_counter()
        try:
            self._instrument(cmd, after=self._unread)
            self._use_timeout(None)
            self._write_text(cmd)
        except TransportError:
            raise
        except _PYVISA_ERRORS as exc:
            raise self._fail(start, t0, cmd, exc, None) from exc
        posted = PostedQuery(cmd, start, t0)
        self._unread.append(posted)
        return posted

    def collect(self, posted: PostedQuery, *, timeout_s: float | None = None) -> str:
        """The reply to ``posted``: replies posted before it and not collected are read
        first and logged as discarded (replies come back in the order of their queries)."""
        if not any(p is posted for p in self._unread):
            raise TransportError(f"the reply to {posted.cmd!r} was already read",
                                 where=self.resource,
                                 fix="collect each posted query once (a bug in sweeprig)")
        text = self._read_until(posted, timeout_s)
        if text is None:  # pragma: no cover - posted was among the unread
            raise AssertionError("a posted reply was not found")
        return text

    def _read_until(self, posted: PostedQuery | None, timeout_s: float | None) -> str | None:
        """Read the owed replies, oldest first, up to ``posted`` (its reply is returned; the
        ones before it are logged as discarded) or all of them (``None``)."""
        while self._unread:
            oldest = self._unread.pop(0)
            if self._inst is None:
                self._unread.clear()
                raise TransportError(f"connection is closed (command {oldest.cmd!r})",
                                     where=self.resource, fix="reconnect before sending")
            try:
                self._use_timeout(timeout_s)
                reply = self._read_text()
            except _PYVISA_ERRORS as exc:
                self._unread.clear()  # a resync (or a reconnect) drains what is owed
                raise self._fail(oldest.start_s, oldest.t0, oldest.cmd, exc, timeout_s) from exc
            text = reply.rstrip("\r\n")
            if oldest is posted:
                self._record(oldest.start_s, oldest.t0, oldest.cmd, text)
                return text
            self._record(oldest.start_s, oldest.t0, oldest.cmd, f"<discarded: {text}>")
        return None

    def query_binary_floats(self, cmd: str, *, timeout_s: float | None = None) -> np.ndarray:
        """Send ``cmd`` and decode an IEEE 488.2 definite-length block of floats, in the byte
        order and data type of the connection settings, with pyvisa's own block reader
        (``query_binary_values``)."""
        start, t0 = time.time(), time.perf_counter()
        where = f"{self.resource}, command {cmd!r}"
        datatype = "d" if self.settings.datatype == "real64" else "f"
        try:
            inst = self._instrument(cmd)
            self._use_timeout(timeout_s)
            raw = inst.query_binary_values(
                cmd, datatype=datatype,
                is_big_endian=self.settings.byte_order == "big",
                container=np.array, header_fmt="ieee",
                expect_termination=bool(inst.read_termination))
            values = np.asarray(raw, dtype=np.float64)
            if not np.all(np.isfinite(values)):
                raise TransportError(
                    "the block holds values that are not finite numbers",
                    where=where,
                    fix="check the instrument's data format (FORMat:DATA and FORMat:BORDer) "
                    "against the profile's connection.byte_order and datatype",
                )
        except TransportError as exc:
            self._record(start, t0, cmd, f"<error: {exc.what}>")
            raise TransportError(exc.what, where=where, fix=exc.fix) from exc
        except _PYVISA_ERRORS as exc:
            raise self._fail(start, t0, cmd, exc, timeout_s) from exc
        label = "REAL,64" if datatype == "d" else "REAL,32"
        self._record(start, t0, cmd, f"<{label} block: {values.size} values>")
        return values


class _RawVisa:
    """The :class:`~sweeprig.transport.resync.RawSession` surface of a pyvisa resource.

    A raw TCP socket has no device-clear message: pyvisa-py's ``clear()`` there only discards
    buffered bytes (and loops forever on a socket the peer has closed), so it is not called;
    the drain and the marked query do the work."""

    def __init__(self, inst: Any, resource: str) -> None:
        self._inst = inst
        self._socket = _is_socket(resource)

    def device_clear(self) -> bool:
        if self._socket:
            return False
        try:
            self._inst.clear()
        except _PYVISA_ERRORS:  # the link has no device clear (some serial resources)
            return False
        return True

    def write_line(self, text: str) -> None:
        self._inst.write(text)

    def read_line(self, timeout_s: float) -> bytes | None:
        before = self._inst.timeout
        self._inst.timeout = int(max(timeout_s, 0.001) * 1000)
        try:
            return bytes(self._inst.read_raw()).rstrip(b"\r\n")
        except pyvisa.errors.VisaIOError as exc:
            if exc.error_code == pyvisa.constants.StatusCode.error_timeout:
                return None
            raise
        finally:
            self._inst.timeout = before


def _is_serial(resource: str) -> bool:
    return resource.strip().upper().startswith("ASRL")


_STOP_BITS = {1.0: "one", 1.5: "one_and_a_half", 2.0: "two"}


def _apply_serial(inst: Any, serial: SerialSettings) -> None:
    """Set the serial line attributes pyvisa's serial resources have (``baud_rate``,
    ``data_bits``, ``parity``, ``stop_bits``, ``flow_control``; pyvisa's constants
    ``Parity``, ``StopBits``, ``ControlFlow``)."""
    constants = pyvisa.constants
    inst.baud_rate = serial.baud_rate
    inst.data_bits = serial.data_bits
    inst.parity = getattr(constants.Parity, serial.parity)
    inst.stop_bits = getattr(constants.StopBits, _STOP_BITS[serial.stop_bits])
    inst.flow_control = getattr(constants.ControlFlow, serial.flow_control)


def _describe(exc: BaseException) -> str:
    text = str(exc).strip() or type(exc).__name__
    return text.splitlines()[0] if text else type(exc).__name__


def _translate(exc: BaseException, resource: str, cmd: str, timeout_s: float) -> TransportError:
    where = f"{resource}, command {cmd!r}"
    if (
        isinstance(exc, pyvisa.errors.VisaIOError)
        and exc.error_code == pyvisa.constants.StatusCode.error_timeout
    ):
        return ReplyTimeout(
            f"no reply within {timeout_s:g} s (timeout)",
            where=where,
            fix="check that the instrument is on and understands the command; a slow operation "
            "may need a longer timeout",
        )
    if isinstance(exc, UnicodeError):
        return TransportError(
            "the reply is not ASCII text",
            where=where,
            fix="check the instrument's data format (FORMat ASCii for text replies)",
        )
    return TransportError(
        f"I/O error: {_describe(exc)}",
        where=where,
        fix="check the cable or network and that the instrument is on; the run can reconnect",
    )
