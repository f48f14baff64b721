"""IEEE 488.2 status model: event status register, status byte, SCPI-99 status registers.

Bits of the event status register (ESR): 0 operation complete, 2 query error, 3 device-
dependent error, 4 execution error, 5 command error, 7 power on. Status byte (STB): bit 2
error queue not empty, bit 3 questionable summary, bit 5 event status summary, bit 6 master
summary. Not thread-safe on its own: the owning instrument holds its lock.
"""

from __future__ import annotations

from dataclasses import dataclass

ESR_OPC = 1 << 0
ESR_QYE = 1 << 2
ESR_DDE = 1 << 3
ESR_EXE = 1 << 4
ESR_CME = 1 << 5
ESR_PON = 1 << 7

STB_ERROR_QUEUE = 1 << 2
STB_QUESTIONABLE = 1 << 3
STB_EVENT_STATUS = 1 << 5
STB_MASTER = 1 << 6

OPER_SWEEPING = 1 << 3
OPER_MEASURING = 1 << 4


def esr_bit_for_error(code: int) -> int:
    """The ESR bit an error sets: −1xx command, −2xx execution, −4xx query, else device."""
    if -199 <= code <= -100:
        return ESR_CME
    if -299 <= code <= -200:
        return ESR_EXE
    if -499 <= code <= -400:
        return ESR_QYE
    return ESR_DDE


@dataclass
class StatusRegisters:
    """The registers of one instrument (event registers latch until read or ``*CLS``)."""

    esr: int = ESR_PON
    ese: int = 0
    sre: int = 0
    questionable_event: int = 0
    questionable_enable: int = 0
    operation_event: int = 0
    operation_enable: int = 0

    def power_on(self) -> None:
        """Power-on state: everything clear except the PON bit."""
        self.esr = ESR_PON
        self.ese = self.sre = 0
        self.questionable_event = self.questionable_enable = 0
        self.operation_event = self.operation_enable = 0

    def clear_events(self) -> None:
        """``*CLS``: event registers cleared (enables kept)."""
        self.esr = 0
        self.questionable_event = 0
        self.operation_event = 0

    def preset(self) -> None:
        """``STATus:PRESet``: SCPI enable registers cleared."""
        self.questionable_enable = 0
        self.operation_enable = 0

    def read_esr(self) -> int:
        """``*ESR?``: the register, then cleared."""
        value, self.esr = self.esr, 0
        return value

    def status_byte(self, error_queue_not_empty: bool) -> int:
        stb = 0
        if error_queue_not_empty:
            stb |= STB_ERROR_QUEUE
        if self.questionable_event & self.questionable_enable:
            stb |= STB_QUESTIONABLE
        if self.esr & self.ese:
            stb |= STB_EVENT_STATUS
        if stb & self.sre & ~STB_MASTER:
            stb |= STB_MASTER
        return stb
