"""Pre-flight on the supply: a plan that would measure the part unpowered is refused where
it surely would (it reads supply_current but never sets the supply: refused with the file,
by check, plan and run alike) and warned about where
it may (no supply set, or a 0 V set point), unless the part is passive."""

from pathlib import Path

import pytest

from sweeprig.errors import InputError
from sweeprig.formats.bench import load_bench
from sweeprig.formats.sequence import load_sequence, sequence_from_dict
from sweeprig.plan import check_limits
from sweeprig.plan.preflight import check_supply

ROOT = Path(__file__).resolve().parents[2]
SIM_BENCH = ROOT / "sequences" / "benches" / "sim.toml"


@pytest.fixture(scope="module")
def bench():
    return load_bench(SIM_BENCH)


@pytest.fixture(scope="module")
def bench_without_supply(tmp_path_factory):
    text = SIM_BENCH.read_text(encoding="utf-8")
    kept = "\n".join(line for line in text.splitlines() if not line.startswith("dc "))
    path = tmp_path_factory.mktemp("bench") / "no-dc.toml"
    path.write_text(kept + "\n", encoding="utf-8")
    loaded = load_bench(path)
    assert loaded.role("dc") is None
    return loaded


def seq(read: list[str], part: dict | None = None, conditions: dict | None = None):
    data = {
        "part": {"id": "KX-1", "expected_gain": "12 dB", **(part or {})},
        "mixing": {"if_frequency": "70 MHz"},
        "study": [{"name": "s", "rf_frequency": "2.4 GHz", "rf_power": -20, "lo_power": 7,
                   "read": read}],
    }
    if conditions is not None:
        data["conditions"] = conditions
    return sequence_from_dict(data)


def test_reading_supply_current_without_a_supply_is_refused_when_read() -> None:
    with pytest.raises(InputError) as info:
        seq(["wanted", "supply_current"])
    err = info.value
    assert "sets no supply voltage" in err.what and "unpowered" in err.what
    assert "conditions" in err.where
    assert "supply =" in err.fix and "[conditions]" in err.fix
    assert err.exit_code != 0


def test_no_supply_on_a_bench_with_one_is_a_warning(bench) -> None:
    report = check_limits(seq(["wanted"]), bench)
    assert report.ok
    (warning,) = report.warnings
    assert "role 'dc'" in warning and "unpowered" in warning and "passive = true" in warning


def test_no_supply_on_a_bench_without_one_says_power_it_by_other_means(
        bench_without_supply) -> None:
    (warning,) = check_supply(seq(["wanted"]), bench_without_supply)
    assert "by other means" in warning


def test_a_passive_part_needs_no_supply(bench) -> None:
    assert check_limits(seq(["wanted"], part={"passive": True}), bench).warnings == []


def test_a_0_v_set_point_is_a_warning(bench) -> None:
    for supply in ("0 V", ["0 V", "3.3 V"], {"start": "0 V", "stop": "3 V", "step": "1 V"}):
        (warning,) = check_supply(seq(["wanted"], conditions={"supply": supply}), bench)
        assert "0 V" in warning and "unpowered" in warning


def test_the_demo_has_no_supply_warning(bench) -> None:
    sequence = load_sequence(ROOT / "sequences" / "demo" / "quick.toml")
    # the only warning is the predicted source-harmonic contamination of its RF feedthrough
    # readings (unfiltered -35 dBc sources; tests/plan/test_source_harmonic_routes.py)
    warnings = check_limits(sequence, bench).warnings
    assert [w for w in warnings if "cannot be trusted as planned" not in w] == []
