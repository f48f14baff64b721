"""The supply's output read at a point: current, voltage and its current-limit state in one
message where the profile joins queries, and the rule that says the part ran below its
stated supply."""

from __future__ import annotations

import pytest

from sweeprig.instruments import make_driver
from sweeprig.instruments.supply import supply_limited
from sweeprig.transport.fake import FakeTransport


def _supply(answers: dict[str, str]) -> tuple[object, FakeTransport]:
    def device(message: str) -> str | None:
        replies = [answers[unit.lstrip(":")] for unit in message.split(";")
                   if unit.endswith("?")]
        return ";".join(replies) if replies else None

    link = FakeTransport(device)
    return make_driver("scpi-supply", "dc", link), link


def test_current_voltage_and_limit_come_in_one_message():
    dc, link = _supply({"MEAS:CURR:DC?": "0.029", "MEAS:VOLT:DC?": "2.81",
                        "STAT:QUES:COND?": "2"})
    current, voltage, limited = dc.read_output()
    assert (current, voltage, limited) == (pytest.approx(0.029), pytest.approx(2.81), True)
    assert len(link.sent) == 1 and link.sent[0].count("?") == 3, link.sent
    dc, _ = _supply({"MEAS:CURR:DC?": "0.031", "MEAS:VOLT:DC?": "3.3",
                     "STAT:QUES:COND?": "1"})
    assert dc.read_output()[2] is False  # another bit of the register: not the limit


@pytest.mark.parametrize(("limited", "volts", "set_v", "expected"), [
    (True, 3.3, 3.3, True),      # the supply says so
    (False, 3.20, 3.3, True),    # 3 % below its setting (the rule: 2 %)
    (None, 3.25, 3.3, False),    # 1.5 % below: a supply in constant voltage, leads' drop
    (None, 0.035, 0.05, True),   # a low setting: at least 10 mV below
    (None, 0.045, 0.05, False),
    (None, 1.0, None, False),    # no setting known: only the supply's own word counts
    (False, float("nan"), 3.3, False),
])
def test_the_part_ran_below_its_stated_supply_when(limited, volts, set_v, expected):
    assert supply_limited(limited, volts, set_v) is expected


def test_the_limit_rides_with_the_points_status_read():
    """The supply's per-point ``*ESR?`` (read after a point) asks its current-limit state in
    the same message; a status read that is not needed sends nothing and keeps no answer."""
    dc, link = _supply({"*ESR?": "0", "STAT:QUES:COND?": "2", "OUTP:PROT:TRIP?": "0"})
    dc.finish_status(dc.post_status())
    assert link.sent == ["*ESR?;:STAT:QUES:COND?;:OUTP:PROT:TRIP?"]
    assert dc.status_seen == {"current_limited": True, "output_tripped": False}
    assert dc.point_status() == 0
    assert dc.post_status() is None and dc.status_seen == {}  # fresh: nothing sent
    assert len(link.sent) == 1


def test_the_name_the_reading_records_is_the_figure_flag():
    """The runner writes the instruments' name, the reduction reads the analysis' one: two
    layers that do not import each other, so the two spellings are pinned together."""
    from sweeprig.analysis.figures import FLAGS
    from sweeprig.analysis.figures import SUPPLY_LIMITED as FLAG
    from sweeprig.instruments.supply import SUPPLY_LIMITED

    assert SUPPLY_LIMITED == FLAG and FLAG in FLAGS
