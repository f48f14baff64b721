"""Bench files state the analyzer's and sources' figures; sequences state margins and policy."""

from pathlib import Path

import pytest

from sweeprig.errors import InputError
from sweeprig.formats.bench import ASSUMED, DEFAULT_HARMONICS_DBC, load_bench
from sweeprig.formats.schema import json_schema
from sweeprig.formats.sequence import sequence_from_dict

ROOT = Path(__file__).resolve().parents[2]

BENCH = """\
[bench]
name = "Bench 7 (fictional)"

[roles.sa]
resource = "TCPIP0::192.0.2.12::5025::SOCKET"
profile = "scpi-analyzer"
noise_figure = "22 dB"

[analyzer]
toi = "18 dBm"
soi = "+40 dBm"
p1db = "5 dBm"
overload = "2 dBm"
phase_noise = [{ offset = "100 kHz", level = "-110 dBc/Hz" }, { offset = "10 kHz", level = -100 }]

[sources.rf]
harmonics = ["-40 dBc", "-50 dB"]
"""


def write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "bench.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_stated_figures_are_read(tmp_path: Path) -> None:
    bench = load_bench(write(tmp_path, BENCH))
    specs = bench.analyzer_specs()
    assert (specs.toi_dbm, specs.soi_dbm, specs.p1db_dbm, specs.overload_dbm) == \
        (18.0, 40.0, 5.0, 2.0)
    assert specs.noise_figure_db == 22.0
    assert specs.phase_noise == ((1e4, -100.0), (1e5, -110.0))  # sorted by offset
    assert specs.assumed == frozenset()
    assert bench.source_harmonics_dbc("rf") == ((-40.0, -50.0), False)
    assert bench.source_harmonics_dbc("lo") == (DEFAULT_HARMONICS_DBC, True)


def test_left_out_figures_are_conservative_and_marked(tmp_path: Path) -> None:
    text = BENCH.split("[analyzer]")[0]
    specs = load_bench(write(tmp_path, text)).analyzer_specs()
    assert specs.assumed == {"toi", "soi", "p1db", "overload", "phase_noise"}
    assert specs.toi_dbm < 15.0 and specs.p1db_dbm < specs.toi_dbm  # pessimistic side
    assert "assumed" in ASSUMED and "not stated by the bench file" in ASSUMED


@pytest.mark.parametrize(("line", "key", "fix"), [
    ('toi = "300 dBm"', "analyzer.toi", "data sheet"),
    ('phase_noise = []', "analyzer.phase_noise", "at least one point"),
    ('phase_noise = [{ offset = "0 Hz", level = "-90 dBc/Hz" }]',
     "analyzer.phase_noise[0].offset", "10 kHz"),
    ('phase_noise = [{ offset = "1 kHz", level = "-90 dBc/Hz" }, '
     '{ offset = "1 kHz", level = "-95 dBc/Hz" }]', "analyzer.phase_noise[1].offset", "once"),
])
def test_bad_figures_are_located(tmp_path: Path, line: str, key: str, fix: str) -> None:
    text = BENCH.replace('toi = "18 dBm"', line) if line.startswith("toi") else \
        BENCH.replace('phase_noise = [{ offset = "100 kHz", level = "-110 dBc/Hz" }, '
                      '{ offset = "10 kHz", level = -100 }]', line)
    with pytest.raises(InputError) as err:
        load_bench(write(tmp_path, text))
    message = err.value.message()
    assert "bench.toml:" in message and key in message and fix in message


def test_schema_documents_the_figures() -> None:
    schema = json_schema("bench")
    text = str(schema)
    assert "second-order intercept" in text and "assumed" in text and "dBc/Hz" in text


def test_sim_bench_states_the_simulators_figures() -> None:
    from sweeprig.engine.sim_specs import with_sim_figures
    from sweeprig.sim.analyzer_display import AnalyzerParams

    bench = with_sim_figures(load_bench(ROOT / "sequences" / "benches" / "sim.toml"))
    specs = bench.analyzer_specs()
    params = AnalyzerParams()
    # two-tone SOI = second-harmonic intercept − 6.02 dB (derived from a2·x², see margins)
    assert specs.soi_dbm == pytest.approx(params.shi_dbm - 6.0206, abs=1e-3)
    assert (specs.toi_dbm, specs.p1db_dbm, specs.overload_dbm, specs.noise_figure_db) == \
        (params.toi_dbm, params.p1db_dbm, params.overload_dbm, params.noise_figure_db)
    # the shipped file says the same as the mapping (so check/plan on it are right)
    plain = load_bench(ROOT / "sequences" / "benches" / "sim.toml").analyzer_specs()
    assert plain.soi_dbm == pytest.approx(specs.soi_dbm, abs=0.01)
    assert plain.toi_dbm == specs.toi_dbm and plain.p1db_dbm == specs.p1db_dbm


def test_served_bench_file_states_the_descriptions_figures(tmp_path: Path) -> None:
    from sweeprig.engine.session import served_bench_text
    from sweeprig.sim.bench import SimBenchDescription

    desc = SimBenchDescription.model_validate({"analyzer": {"toi": "25 dBm"},
                                               "sources": {"harmonics": ["-60 dBc"]}})
    text = served_bench_text({}, desc)
    bench = load_bench(write(tmp_path, text))
    assert bench.analyzer_specs().toi_dbm == 25.0
    assert bench.source_harmonics_dbc("lo") == ((-60.0,), False)


def seq(**analyzer: object):
    return sequence_from_dict({
        "part": {"id": "KX-1", "expected_gain": "-7 dB"},
        "mixing": {"if_frequency": "70 MHz"},
        "analyzer": analyzer,
        "study": [{"name": "s", "rf_frequency": "2.4 GHz", "rf_power": -20, "lo_power": 7,
                   "read": ["wanted"]}]})


def test_sequence_margins_and_policy() -> None:
    s = seq()
    assert (s.analyzer.noise_margin, s.analyzer.distortion_margin) == (10.0, 20.0)
    assert s.analyzer.on_risk == "warn" and s.analyzer.max_sweep_time == 2.0
    assert s.study[0].attenuation_check is None  # automatic
    s = seq(distortion_margin="30 dB", on_risk="refuse", max_sweep_time="500 ms")
    assert (s.analyzer.distortion_margin, s.analyzer.on_risk, s.analyzer.max_sweep_time) == \
        (30.0, "refuse", 0.5)
    with pytest.raises(InputError) as err:
        seq(distortion_margin="-1 dB")
    assert "analyzer.distortion_margin" in err.value.message()
