"""SCPI core of the simulated instruments: parser, command tree, error queue, status model.

Subclass :class:`ScpiInstrument` to write an instrument (see its module docstring).
"""

from sweeprig.sim.scpi.errors import ErrorEntry, ErrorQueue, ScpiError, standard_text
from sweeprig.sim.scpi.instrument import (
    SCPI_NAN,
    Command,
    Identity,
    ScpiInstrument,
    Setting,
    format_number,
)
from sweeprig.sim.scpi.parser import Param, ProgramUnit, parse_unit, split_params, split_units
from sweeprig.sim.scpi.status import (
    ESR_CME,
    ESR_DDE,
    ESR_EXE,
    ESR_OPC,
    ESR_PON,
    ESR_QYE,
    OPER_MEASURING,
    OPER_SWEEPING,
    StatusRegisters,
)
from sweeprig.sim.scpi.tree import CommandTree

__all__ = [
    "ESR_CME",
    "ESR_DDE",
    "ESR_EXE",
    "ESR_OPC",
    "ESR_PON",
    "ESR_QYE",
    "OPER_MEASURING",
    "OPER_SWEEPING",
    "SCPI_NAN",
    "Command",
    "CommandTree",
    "ErrorEntry",
    "ErrorQueue",
    "Identity",
    "Param",
    "ProgramUnit",
    "ScpiError",
    "ScpiInstrument",
    "Setting",
    "StatusRegisters",
    "format_number",
    "parse_unit",
    "split_params",
    "split_units",
    "standard_text",
]
