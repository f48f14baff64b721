"""Guards for input-handling fixes: huge numbers, unusable file names, long text in messages,
strict booleans, safe-state and timeout checks at load, and Touchstone/CSV table edge cases."""

from pathlib import Path

import numpy as np
import pytest

from sweeprig.errors import InputError
from sweeprig.formats.bench import load_bench
from sweeprig.formats.fields import range_model
from sweeprig.formats.loading import parse_toml
from sweeprig.formats.pathloss import read_csv_loss, read_touchstone_loss
from sweeprig.formats.sequence import load_sequence
from sweeprig.formats.toml_locate import format_key_path
from sweeprig.units import parse_quantity, shorten

WHERE = "bench.toml:9: path_loss.rf"

SEQUENCE = """\
[part]
id = "KX-2407 (fictional)"
expected_gain = "-7 dB"

[mixing]
if_frequency = "70 MHz"

[[study]]
name = "gain"
rf_frequency = "2.4 GHz"
rf_power = "-20 dBm"
lo_power = "7 dBm"
read = ["wanted"]
"""

BENCH = """\
[bench]
name = "Bench 7 (fictional)"
{bench_extra}
[roles]
rf = {{ resource = "TCPIP0::192.0.2.10::5025::SOCKET", profile = "scpi-source" }}

[limits]
supply_max_voltage = "6 V"
chamber_min = "-40 degC"
chamber_max = "85 degC"
part = {{ supply_max = "3.6 V" }}

[safe_state]
{safe}
"""


def write(folder: Path, text: str, name: str) -> Path:
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


def refusal(call: object, *args: object, **kwargs: object) -> InputError:
    with pytest.raises(InputError) as info:
        call(*args, **kwargs)  # type: ignore[operator]
    return info.value


# -- numbers beyond range -------------------------------------------------------------------------


def test_a_step_count_beyond_the_float_range_is_counted_exactly() -> None:
    spec = range_model("frequency")(start=1e9, stop=1e13, step=1e-297)
    assert spec.count() > 10**309


def test_a_sequence_of_too_many_points_for_a_float_is_refused_with_its_size(
        tmp_path: Path) -> None:
    text = SEQUENCE.replace('"2.4 GHz"', "{ start = 1e9, stop = 1e13, step = 1e-297 }")
    error = refusal(load_sequence, write(tmp_path, text, "seq.toml"))
    assert "about 9.9e+309 points" in error.what and "--max-points" in (error.fix or "")


def test_a_power_of_5_99e307_dbm_is_refused_where_it_is_written(tmp_path: Path) -> None:
    """A finite power the planner's third-order products would overflow (found by the loader
    fuzzer): refused at load, located, before any planning."""
    text = SEQUENCE.replace('rf_power = "-20 dBm"', "rf_power = 5.992310449545e+307")
    error = refusal(load_sequence, write(tmp_path, text, "seq.toml"))
    assert "beyond ±300 dBm" in error.what
    assert str(error.where).endswith("seq.toml:11: study[0].rf_power")


def test_an_integer_of_5000_digits_is_a_located_input_error() -> None:
    error = refusal(parse_toml, "a = 1\nb = " + "7" * 5000 + "\n", "f.toml")
    assert error.where == "f.toml:2" and error.fix


def test_a_toml_error_at_the_end_points_at_the_last_line() -> None:
    error = refusal(parse_toml, 'a = 1\nb = "open\n', "f.toml")
    assert error.where == "f.toml:2"


# -- file names no file system takes ------------------------------------------------------------


@pytest.mark.parametrize("name", ["bad\u0000name.toml", "x" * 5000 + ".toml"])
def test_an_include_no_file_can_have_is_missing(tmp_path: Path, name: str) -> None:
    path = write(tmp_path, f"include = [{name!r}]\n" + SEQUENCE, "seq.toml")
    error = refusal(load_sequence, path)
    assert "include[0]" in str(error.where) and "check the name" in (error.fix or "")
    assert len(error.message()) < 1000


@pytest.mark.parametrize("name", ["bad\u0000name", "x" * 5000])
def test_a_loss_table_no_file_can_have_is_refused(tmp_path: Path, name: str) -> None:
    for reader, suffix in ((read_csv_loss, ".csv"), (read_touchstone_loss, ".s2p")):
        error = refusal(reader, tmp_path / (name + suffix), display=name + suffix, where=WHERE)
        assert error.where == WHERE and "check the name" in (error.fix or "")
        assert len(error.message()) < 1000


# -- long text is shortened ----------------------------------------------------------------------


def test_shorten_keeps_short_text_and_cuts_long_text_with_its_length() -> None:
    assert shorten("abc") == "abc"
    cut = shorten("x" * 100_000)
    assert cut.startswith("x" * 80) and "100,000 characters" in cut and len(cut) < 120


def test_a_long_value_and_a_long_key_are_shortened_in_messages() -> None:
    error = refusal(parse_quantity, "-20 " + "x" * 100_000, "power", where="here")
    assert len(error.message()) < 500
    assert len(format_key_path(("study", 0, "k" * 100_000))) < 200


def test_an_unknown_long_key_gives_a_short_message(tmp_path: Path) -> None:
    text = SEQUENCE.replace('read = ["wanted"]', 'read = ["wanted"]\n' + "q" * 100_000 + " = 1")
    error = refusal(load_sequence, write(tmp_path, text, "seq.toml"))
    assert "unknown key" in error.what and len(error.message()) < 1000


# -- booleans are true or false --------------------------------------------------------------------


@pytest.mark.parametrize("value", ['"yes"', '"true"', "1"])
def test_a_bool_key_takes_only_true_or_false(tmp_path: Path, value: str) -> None:
    text = SEQUENCE.replace('read = ["wanted"]', f'read = ["wanted"]\nattenuation_check = {value}')
    error = refusal(load_sequence, write(tmp_path, text, "seq.toml"))
    assert "attenuation_check" in str(error.where) and "true or false" in (error.fix or "")


# -- bench checks at load ------------------------------------------------------------------------


@pytest.mark.parametrize(("safe", "key", "named"), [
    ('supply = "5 V"', "safe_state.supply", "supply_max"),
    ('chamber = "150 degC"', "safe_state.chamber", "chamber_max"),
    ('chamber = "-60 degC"', "safe_state.chamber", "chamber_min"),
])
def test_a_safe_state_outside_the_limits_is_refused_at_load(
        tmp_path: Path, safe: str, key: str, named: str) -> None:
    path = write(tmp_path, BENCH.format(bench_extra="", safe=safe), "bench.toml")
    error = refusal(load_bench, path)
    assert key in str(error.where) and named in error.what
    assert "Caution" in (error.fix or "")


def test_a_safe_state_within_the_limits_loads(tmp_path: Path) -> None:
    text = BENCH.format(bench_extra="", safe='supply = "3.3 V"\nchamber = "25 degC"')
    load_bench(write(tmp_path, text, "bench.toml"))


@pytest.mark.parametrize("timeout", ['"0 s"', '"-5 s"'])
def test_a_timeout_not_above_zero_is_refused_at_load(tmp_path: Path, timeout: str) -> None:
    text = BENCH.format(bench_extra=f"timeout = {timeout}\n", safe="")
    error = refusal(load_bench, write(tmp_path, text, "bench.toml"))
    assert "bench.timeout" in str(error.where) and error.fix


# -- loss tables -------------------------------------------------------------------------------


def test_csv_comments_and_blank_lines_may_precede_the_header(tmp_path: Path) -> None:
    path = write(tmp_path, "# cable (fictional)\n\nfreq_hz, loss_db\n# measured\n2e9, 2.9\n\n"
                 "2.6e9, 3.2\n", "rf.csv")
    table = read_csv_loss(path, display="rf.csv", where=WHERE)
    np.testing.assert_allclose(table.freq_hz, [2e9, 2.6e9])


def test_a_csv_header_without_rows_has_no_data_rows(tmp_path: Path) -> None:
    path = write(tmp_path, "# nothing yet\nfreq_hz, loss_db\n", "rf.csv")
    error = refusal(read_csv_loss, path, display="rf.csv", where=WHERE)
    assert "no data rows" in error.what and "at least 2 rows" in error.what


S2P_ROW = " -20.0 0 -0.70 -30 -0.70 -30 -20.0 0\n"


def test_an_empty_touchstone_file_is_refused_before_scikit_rf(tmp_path: Path) -> None:
    path = write(tmp_path, "", "rf.s2p")
    error = refusal(read_touchstone_loss, path, display="rf.s2p", where=WHERE)
    assert "empty" in error.what and "valid Touchstone" in (error.fix or "")


def test_touchstone_frequencies_must_increase(tmp_path: Path) -> None:
    text = "# GHz S DB R 50\n2.6" + S2P_ROW + "2.5" + S2P_ROW + "2.3" + S2P_ROW
    error = refusal(read_touchstone_loss, write(tmp_path, text, "rf.s2p"), display="rf.s2p",
                    where=WHERE)
    assert "rf.s2p:3" in error.what and "increase" in error.what


def test_a_touchstone_file_without_rows_is_refused(tmp_path: Path) -> None:
    error = refusal(read_touchstone_loss, write(tmp_path, "# GHz S DB R 50\n", "rf.s2p"),
                    display="rf.s2p", where=WHERE)
    assert "no data rows" in error.what and error.where == WHERE


def test_touchstone_noise_rows_after_the_s_parameters_are_not_a_decrease(tmp_path: Path) -> None:
    text = ("# GHz S DB R 50\n2.0" + S2P_ROW + "2.5" + S2P_ROW + "3.0" + S2P_ROW
            + "! noise parameters\n2.0 1.5 0.3 20 0.4\n2.5 1.6 0.3 25 0.4\n")
    table = read_touchstone_loss(write(tmp_path, text, "rf.s2p"), display="rf.s2p", where=WHERE)
    np.testing.assert_allclose(table.freq_hz, [2e9, 2.5e9, 3e9])
