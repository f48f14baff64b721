"""An unpowered or wrongly powered part: its conversion gain collapses far below the part's
``expected_gain``, and every figure from such a point carries the ``unpowered`` flag, so no
spec passes on it. The margin (20 dB) is common practice, no source."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from sweeprig.analysis.figures import FLAGS, SUSPECT_FLAGS, UNPOWERED, Figure, flag_points
from sweeprig.analysis.limits import INCONCLUSIVE, Limit, judge
from sweeprig.analysis.reduce import reduce_run
from sweeprig.analysis.validity import UNPOWERED_GAIN_MARGIN_DB, gain_collapsed
from sweeprig.engine.session import run_sequence, shipped_sequences_dir
from sweeprig.report.tables import FLAG_HELP, figures_document, figures_frame
from sweeprig.store.sqlite import SqliteRunStore

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"


def test_gain_collapsed_counts_gains_more_than_the_margin_below_expected():
    assert UNPOWERED_GAIN_MARGIN_DB == 20.0
    gain = np.array([12.0, -7.9, -8.1, -78.0, np.nan])
    assert gain_collapsed(gain, 12.0).tolist() == [False, False, True, True, False]
    assert gain_collapsed(gain, 12.0, margin_db=100.0).tolist() == [False] * 5
    # a conversion loss part (expected −7 dB): −20 dB is still within the margin
    assert gain_collapsed([-20.0, -28.0], -7.0).tolist() == [False, True]


def test_several_marks_are_added_in_one_pass(monkeypatch: pytest.MonkeyPatch) -> None:
    """Each mark's flag on the figures of its points, in FLAGS order; a figure marked twice
    is made again once, a figure that has the flag already (or no marked point) is kept."""
    from sweeprig.analysis.figures import SUPPLY_LIMITED, TEMPERATURE_OFF, flag_marked_points

    a = Figure("conversion_gain", 11.0, "dB", points=(3,))
    b = Figure("conversion_gain", 12.0, "dB", flags=(UNPOWERED,), points=(4,))
    c = Figure("gain_flatness", 0.5, "dB", points=(2, 3, 4))
    d = Figure("conversion_gain", 13.0, "dB", points=(9,))
    marks = [(UNPOWERED, [4, 4]), (TEMPERATURE_OFF, np.array([3])),
             (SUPPLY_LIMITED, (3, 4))]
    made: list[object] = []
    from sweeprig.analysis import figures as figures_module

    real = figures_module.with_changes

    def counted(figure: Figure, **changes: object) -> Figure:
        made.append(figure)
        return real(figure, **changes)

    monkeypatch.setattr(figures_module, "with_changes", counted)
    out = flag_marked_points([a, b, c, d], marks)
    assert set(out[0].flags) == {TEMPERATURE_OFF, SUPPLY_LIMITED}
    assert list(out[0].flags) == [f for f in FLAGS if f in out[0].flags]
    assert set(out[1].flags) == {UNPOWERED, SUPPLY_LIMITED}
    assert set(out[2].flags) == {UNPOWERED, TEMPERATURE_OFF, SUPPLY_LIMITED}
    assert out[3] is d
    assert made == [a, b, c]  # each made again once
    assert flag_marked_points([b], [(UNPOWERED, [4])])[0] is b
    assert flag_marked_points([a], [])[0] is a


def test_the_flag_is_suspect_and_explained():
    assert UNPOWERED in FLAGS and UNPOWERED in SUSPECT_FLAGS
    badge, meaning = FLAG_HELP[UNPOWERED]
    assert badge and "expected gain" in meaning and "unpowered" in meaning


def test_flag_points_marks_only_figures_from_those_points():
    a = Figure("conversion_gain", -78.0, "dB", flags=("in_noise",), points=(3,))
    b = Figure("conversion_gain", 12.0, "dB", points=(4,))
    c = Figure("gain_flatness", 90.0, "dB", points=(2, 3, 4))
    out = flag_points([a, b, c], [3], UNPOWERED)
    assert out[0].flags == ("in_noise", UNPOWERED)
    assert out[1] is b
    assert UNPOWERED in out[2].flags
    assert flag_points([a], [], UNPOWERED)[0] is a
    limit = Limit("conversion_gain", min=-100.0, max=14.0)  # the number alone would pass
    assert judge(out[0], limit).verdict == INCONCLUSIVE


def _run(sequence: Path, store_path: Path):
    outcome = run_sequence(sequence, sim=True, store_path=store_path)
    assert outcome.status == "complete", outcome.reason
    store = SqliteRunStore(store_path)
    try:
        events = list(store.events(outcome.run_id))
        return reduce_run(store, outcome.run_id), events
    finally:
        store.close()


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("unpowered")
    text = QUICK.read_text(encoding="utf-8")
    assert 'supply = "3.3 V"' in text
    dead = folder / "supply-0v.toml"
    dead.write_text(text.replace('supply = "3.3 V"', 'supply = "0 V"'), encoding="utf-8")
    return {"demo": _run(QUICK, folder / "demo.sqlite"),
            "dead": _run(dead, folder / "dead.sqlite")}


def test_a_part_at_0_v_is_flagged_unpowered_and_cannot_pass(runs):
    run, events = runs["dead"]
    gains = run.figures_named("conversion_gain")
    assert gains
    # the simulated part at 0 V does not convert: its gain is tens of dB below 12 dB
    assert all(g.value < 12.0 - UNPOWERED_GAIN_MARGIN_DB for g in gains)
    assert all(UNPOWERED in g.flags for g in gains)
    assert run.verdict != "pass"
    assert all(j.verdict != "pass" for j in run.assessment.judgements
               if j.figure.name == "conversion_gain")
    assert any("unpowered" in n for n in run.notes)
    assert any(e.kind == "preflight" and "0 V" in e.message for e in events)
    document = figures_document(run)
    json.dumps(document, allow_nan=False)
    assert any(UNPOWERED in flags.split() for flags in figures_frame(run)["flags"])


def test_the_demo_is_not_flagged_unpowered(runs):
    run, events = runs["demo"]
    assert run.figures_named("conversion_gain")
    assert not any(UNPOWERED in f.flags for f in run.figures)
    assert not any("unpowered" in n for n in run.notes)
    # no supply warning (its RF feedthrough readings do carry the source-harmonic risk: the
    # simulated LO's -35 dBc 2nd harmonic makes RF feedthrough as strong as the part's)
    assert not any(e.kind == "preflight" and ("supply" in e.message or "unpowered" in e.message)
                   for e in events)
