"""``sweeprig check`` and ``sweeprig plan`` refuse a ``[[spec]]`` no planned point can
evaluate (a condition never visited, a figure no study measures), with a located message
that says what the sequence does visit or measure, and exit 2."""

from pathlib import Path

import pytest

from tests.support import check_app, invoke

ROOT = Path(__file__).resolve().parents[2]
DEMOS = sorted((ROOT / "sequences" / "demo").glob("*.toml"))

HEAD = """\
[part]
id = "KX-1 (fictional)"
expected_gain = "-7 dB"
[mixing]
if_frequency = "70 MHz"
[conditions]
temperature = ["-40 degC", "25 degC", "85 degC"]
supply = ["3.0 V", "3.3 V"]
soak = "1 min"
[[study]]
name = "gain"
rf_frequency = "2.4 GHz"
rf_power = "-20 dBm"
lo_power = "7 dBm"
read = ["wanted", "lo_at_if", "supply_current"]
"""


@pytest.fixture(scope="module")
def app():
    return check_app()


def run(app, *args: object):
    return invoke(app, *args)


def write(tmp_path: Path, spec: str, head: str = HEAD) -> Path:
    path = tmp_path / "seq.toml"
    path.write_text(head + "\n[[spec]]\n" + spec, encoding="utf-8")
    return path


@pytest.mark.parametrize("demo", DEMOS, ids=lambda p: p.name)
def test_the_demo_sequences_and_their_specs_pass(app, demo: Path) -> None:
    result = run(app, "check", demo)
    assert result.exit_code == 0, result.output


def test_specs_at_visited_conditions_pass(app, tmp_path: Path) -> None:
    path = write(tmp_path, 'figure = "conversion_gain_db"\nmin = "5 dB"\n'
                 'temperature = "85 degC"\nsupply = "3.3 V"\nstudy = "gain"\n'
                 '[[spec]]\nfigure = "lo_if_isolation_db"\nmin = "20 dB"\n'
                 '[[spec]]\nfigure = "supply_current_a"\nmax = "60 mA"\n')
    assert run(app, "check", path).exit_code == 0


def test_a_temperature_never_visited_is_refused(app, tmp_path: Path) -> None:
    path = write(tmp_path, 'figure = "conversion_gain_db"\nmin = "5 dB"\n'
                 'temperature = "70 degC"\n')
    result = run(app, "check", path)
    assert result.exit_code == 2
    out = " ".join(result.output.split())
    assert "seq.toml:20: spec[0].temperature" in out
    assert "temperature 70 degC, which the sequence never visits" in out
    assert "temperatures visited: -40, 25, 85 degC" in out
    assert "fix: add 70 degC to [conditions] temperature" in out


def test_a_temperature_without_a_chamber_is_refused(app, tmp_path: Path) -> None:
    head = HEAD.replace('temperature = ["-40 degC", "25 degC", "85 degC"]\n', "")
    path = write(tmp_path, 'figure = "conversion_gain_db"\nmin = "5 dB"\n'
                 'temperature = "25 degC"\n', head)
    result = run(app, "check", path)
    assert result.exit_code == 2
    out = " ".join(result.output.split())
    assert "spec[0].temperature" in out and "sets no temperature" in out
    assert 'give [conditions] temperature = "25 degC"' in out


def test_a_supply_voltage_never_visited_is_refused(app, tmp_path: Path) -> None:
    path = write(tmp_path, 'figure = "supply_current_a"\nmax = "60 mA"\nsupply = "5 V"\n')
    result = run(app, "check", path)
    assert result.exit_code == 2
    out = " ".join(result.output.split())
    assert "seq.toml:20: spec[0].supply" in out
    assert "supply voltages visited: 3, 3.3 V" in out
    assert "add 5 V to [conditions] supply" in out


def test_a_figure_no_study_measures_is_refused(app, tmp_path: Path) -> None:
    path = write(tmp_path, 'figure = "iip3_dbm"\nmin = "10 dBm"\n')
    result = run(app, "check", path)
    assert result.exit_code == 2
    out = " ".join(result.output.split())
    assert "seq.toml:18: spec[0].figure" in out
    assert "no study in the sequence measures iip3_dbm" in out
    assert "the sequence measures conversion_gain_db, lo_if_isolation_db, supply_current_a" \
        in out
    assert 'fix: add a two-tone study (tone_spacing) reading "wanted" and "im3"' in out


def test_a_study_that_does_not_measure_the_figure_is_refused(app, tmp_path: Path) -> None:
    head = HEAD + """\
[[study]]
name = "compression"
rf_frequency = "2.4 GHz"
rf_power = { start = "-20 dBm", stop = "0 dBm", step = "1 dB" }
lo_power = "7 dBm"
read = ["wanted"]
"""
    path = write(tmp_path, 'figure = "input_p1db_dbm"\nmin = "-10 dBm"\nstudy = "gain"\n',
                 head)
    result = run(app, "check", path)
    assert result.exit_code == 2
    out = " ".join(result.output.split())
    assert "spec[0].study" in out and "study 'gain' does not measure input_p1db_dbm" in out
    assert "studies that measure it: 'compression'" in out


def test_plan_refuses_it_too(app, tmp_path: Path) -> None:
    path = write(tmp_path, 'figure = "spur_dbc"\nmax = "-60 dBc"\n')
    result = run(app, "plan", path)
    assert result.exit_code == 2
    assert "no study in the sequence measures spur_dbc" in " ".join(result.output.split())
