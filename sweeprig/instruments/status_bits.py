"""SCPI-99 questionable status register: what each bit means by default.

SCPI-99 Volume 1 (Syntax and Style), chapter 9 "Status Reporting" (from memory, not checked
against the text): the QUEStionable status register is a SCPI register set (CONDition,
positive/negative transition filters, EVENt, ENABle); its summary goes to bit 3 of the IEEE
488.2 status byte only for bits set in ``STATus:QUEStionable:ENABle``. Bit assignments:
0 VOLTage, 1 CURRent, 2 TIME, 3 POWer, 4 TEMPerature, 5 FREQuency, 6 PHASe, 7 MODulation,
8 CALibration, 9–12 available to the designer, 13 INSTrument summary, 14 command warning.

So an input overload (the power reading is questionable) defaults to bit 3, and an
uncalibrated reading to bit 8; a profile whose instrument differs states its own ``mask``.
"""

from __future__ import annotations

QUESTIONABLE_BITS: dict[str, int] = {
    "VOLTage": 0, "CURRent": 1, "TIME": 2, "POWer": 3, "TEMPerature": 4, "FREQuency": 5,
    "PHASe": 6, "MODulation": 7, "CALibration": 8, "INSTrument": 13, "command warning": 14,
}
"""SCPI-99 QUEStionable register: bit name → bit number."""

OVERLOAD_MASK = 1 << QUESTIONABLE_BITS["POWer"]
"""Default mask of the analyzer's ``overload`` flag: POWer, bit 3 (value 8)."""

UNLEVELED_MASK = 1 << QUESTIONABLE_BITS["POWer"]
"""Default mask of a source's ``unleveled`` flag: POWer, bit 3 (value 8): its output level
is questionable (not leveled)."""

FREQUENCY_MASK = 1 << QUESTIONABLE_BITS["FREQuency"]
"""Default mask of the ``reference_unlocked`` flag: FREQuency, bit 5 (value 32)."""

UNCALIBRATED_MASK = 1 << QUESTIONABLE_BITS["CALibration"]
"""Default mask of the analyzer's ``uncalibrated`` flag: CALibration, bit 8 (value 256)."""

TRIPPED_MASK = 1
"""Default mask of a source's or supply's ``output_tripped`` flag: SCPI-99's
``OUTPut:PROTection:TRIPped?`` answers 1 when the output's protection has tripped (over
voltage or current on a supply, reverse power on a generator) and 0 otherwise (from memory,
not checked against the text); not a questionable-register bit."""
