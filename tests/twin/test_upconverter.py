"""A twin of an upconverter: the fit takes a run of the demo upconverter (IF in, RF out) with
the shipped upconverter template, recovers the simulated part's core within its intervals,
and the twin, run on the simulated bench, gives back the measured figures within the twin's
targets (gain ±0.1 dB, input P1dB ±0.3 dB, IIP3 ±0.5 dB, isolations ±1 dB; the LO leakage,
LO suppression and sideband suppression, which are LO→RF isolation and line ratios read
another way, ±1 dB)."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.analysis.reduce import reduce_run
from sweeprig.cli.main import app
from sweeprig.sim.bench import prepare_part, resolve_description
from sweeprig.store.sqlite import SqliteRunStore
from sweeprig.twin.compare import compare_figures
from sweeprig.twin.from_run import StoredRunTwin, fit_stored_run
from sweeprig.twin.partfile import check_part_text, write_part_file
from tests.support import invoke
from tests.twin.runs import run_on_sim

SMALL_UP = Path(__file__).parent / "data" / "small-up.toml"


@pytest.fixture(scope="module")
def up_store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return run_on_sim(SMALL_UP, tmp_path_factory.mktemp("small-up-run"))


@pytest.fixture(scope="module")
def up_twin(up_store: Path) -> StoredRunTwin:
    return fit_stored_run(up_store, 1)


def _figures(store: Path):
    with SqliteRunStore(store, create=False) as db:
        return reduce_run(db, 1).figures


def test_an_upconverter_run_is_fitted_with_the_upconverter_template(up_twin):
    fit = up_twin.fit
    assert fit.part.conversion == "up" and fit.converged
    assert 'conversion = "up"' in up_twin.text and "template kx-5860u" in up_twin.text
    assert check_part_text(up_twin.text).conversion == "up"
    keys = {p.key for p in fit.parameters}
    # the input port of an upconverter is its IF port: its corners are what the IF sweep
    # constrains; the LO leakage at the output is the LO→RF path
    assert {"core.tail_current", "core.emitter_degeneration", "ports.if.highpass",
            "ports.if.lowpass", "isolation.lo_to_rf", "isolation.lo_to_if"} <= keys
    assert not keys & {"ports.rf.highpass", "ports.rf.lowpass"}


def test_the_fit_recovers_the_upconverters_core_within_its_intervals(up_twin):
    """The part as it sits on the clean bench (its truth) against the 95 % intervals."""
    truth = prepare_part(resolve_description("clean").model_copy(
        update={"part": "kx-5860u"}))
    expected = {
        "core.tail_current": truth.tail_current_a,
        "core.emitter_degeneration": truth.emitter_degeneration_ohm,
        "core.aux_current": truth.aux_current_a,
        "isolation.lo_to_rf": truth.isolation_lo_rf_db,
        "isolation.lo_to_if": truth.isolation_lo_if_db,
    }
    missed = {k: (v, up_twin.fit.parameter(k).low, up_twin.fit.parameter(k).high)
              for k, v in expected.items() if not up_twin.fit.parameter(k).covers(v)}
    assert not missed, missed


def test_the_twin_reproduces_the_upconverters_measured_figures(up_store, up_twin, tmp_path):
    write_part_file(up_twin.text, tmp_path / "twin.toml")
    text = SMALL_UP.read_text(encoding="utf-8").replace(
        'sim_part = "kx-5860u"', 'sim_part = "twin.toml"', 1)
    sequence = tmp_path / "small-up-on-twin.toml"
    sequence.write_text(text, encoding="utf-8")
    twin_store = run_on_sim(sequence, tmp_path)
    pairs = compare_figures(_figures(up_store), _figures(twin_store))
    names = {p.name for p in pairs}
    assert {"conversion_gain", "input_p1db", "iip3", "lo_rf_isolation", "lo_if_isolation",
            "lo_leakage", "lo_suppression", "sideband_suppression"} <= names, names
    missed = [(p.name, dict(p.conditions), round(p.difference, 3)) for p in pairs
              if not p.within]
    assert not missed, missed


def test_a_downconverter_template_for_an_upconverter_run_is_refused(up_store, tmp_path):
    out = tmp_path / "twin.toml"
    result = invoke(app, "twin", "fit", 1, "--store", up_store, "--template", "kx-2417",
                    "--out", out)
    assert result.exit_code == 2 and not out.exists(), result.output
    assert "is of an upconverter" in result.output and "is a downconverter" in result.output
    assert "kx-5860u" in result.output and "Traceback" not in result.output
