"""SCPI-99 error codes, the instrument error queue and the error a handler raises.

A handler that refuses a command raises :class:`ScpiError` with a standard code; the
instrument pushes it to its :class:`ErrorQueue` and sets the matching event-status bit.
Queue entries read back as ``<code>,"<text>[;<detail>]"``.
"""

from __future__ import annotations

import threading
from collections import deque
from dataclasses import dataclass

#: SCPI-99 standard texts of the codes the simulated instruments use.
STANDARD_TEXTS: dict[int, str] = {
    0: "No error",
    -100: "Command error",
    -102: "Syntax error",
    -104: "Data type error",
    -108: "Parameter not allowed",
    -109: "Missing parameter",
    -113: "Undefined header",
    -131: "Invalid suffix",
    -200: "Execution error",
    -221: "Settings conflict",
    -222: "Data out of range",
    -224: "Illegal parameter value",
    -230: "Data corrupt or stale",
    -350: "Queue overflow",
    -410: "Query INTERRUPTED",
}

QUEUE_OVERFLOW = -350
ERROR_QUEUE_DEPTH = 16


def standard_text(code: int) -> str:
    """The SCPI-99 text of ``code`` (a generic class text for codes not in the table)."""
    if code in STANDARD_TEXTS:
        return STANDARD_TEXTS[code]
    if -199 <= code <= -100:
        return "Command error"
    if -299 <= code <= -200:
        return "Execution error"
    if -399 <= code <= -300:
        return "Device-specific error"
    if -499 <= code <= -400:
        return "Query error"
    return "Device-specific error"


class ScpiError(Exception):
    """Raised by a command handler to refuse a command: pushed to the error queue.

    ``code`` is a SCPI-99 code (negative) or a device-specific positive code; ``detail`` is
    appended to the standard text after ``;`` (``-222,"Data out of range;FREQ 7E9 above 6E9"``).
    """

    def __init__(self, code: int, detail: str = "", *, text: str | None = None) -> None:
        self.code = code
        self.text = text if text is not None else standard_text(code)
        self.detail = detail
        super().__init__(self.entry().as_reply())

    def entry(self) -> ErrorEntry:
        return ErrorEntry(self.code, self.text, self.detail)


@dataclass(frozen=True)
class ErrorEntry:
    """One error-queue entry."""

    code: int
    text: str
    detail: str = ""

    def as_reply(self) -> str:
        """``<code>,"<text>[;<detail>]"`` with embedded double quotes doubled (IEEE 488.2)."""
        body = f"{self.text};{self.detail}" if self.detail else self.text
        return f'{self.code},"{body.replace(chr(34), chr(34) * 2)}"'


NO_ERROR = ErrorEntry(0, "No error")


class ErrorQueue:
    """First-in first-out error queue of ``depth`` entries (SCPI-99).

    When full, the newest entry is replaced by ``-350,"Queue overflow"`` and further errors
    are discarded until an entry is read. Thread-safe.
    """

    def __init__(self, depth: int = ERROR_QUEUE_DEPTH) -> None:
        self.depth = depth
        self._entries: deque[ErrorEntry] = deque()
        self._lock = threading.Lock()

    def push(self, entry: ErrorEntry) -> None:
        with self._lock:
            if len(self._entries) < self.depth:
                self._entries.append(entry)
            elif self._entries[-1].code != QUEUE_OVERFLOW:
                self._entries[-1] = ErrorEntry(QUEUE_OVERFLOW, standard_text(QUEUE_OVERFLOW))

    def pop(self) -> ErrorEntry:
        """The oldest entry (removed), or ``0,"No error"`` when empty."""
        with self._lock:
            return self._entries.popleft() if self._entries else NO_ERROR

    def clear(self) -> None:
        with self._lock:
            self._entries.clear()

    def __len__(self) -> int:
        with self._lock:
            return len(self._entries)

    def snapshot(self) -> list[ErrorEntry]:
        """The queued entries, oldest first, without removing them."""
        with self._lock:
            return list(self._entries)
