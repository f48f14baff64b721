"""The bench file's [timebase]: which 10 MHz reference each instrument runs on."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.errors import InputError
from sweeprig.formats.bench import load_bench
from sweeprig.formats.timebase import DEFAULT_CRYSTAL_PPM
from tests.formats.test_bench_file import BENCH, write


def test_locks_resolve_to_the_reference_at_the_end_of_the_chain(tmp_path: Path) -> None:
    bench = load_bench(write(tmp_path, BENCH + """
[timebase]
sa = { internal = "0.1 ppm" }
lo = { lock = "sa" }
rf = { lock = "lab" }

[timebase.external]
lab = "50 ppb"
"""))
    refs = bench.references()
    assert refs is not None
    assert refs.reference["lo"] == refs.reference["sa"] == "sa:crystal"
    assert refs.reference["rf"] == "lab"
    assert refs.tolerance_of("sa") == pytest.approx(0.1)
    assert refs.tolerance_of("rf") == pytest.approx(0.05)  # 50 ppb
    assert refs.locked == {"lo", "rf"}
    assert not refs.assumed


def test_a_role_left_out_runs_on_an_assumed_crystal(tmp_path: Path) -> None:
    bench = load_bench(write(tmp_path, BENCH + '\n[timebase]\nlo = { lock = "sa" }\n'))
    refs = bench.references()
    assert refs is not None
    assert refs.tolerance_of("rf") == DEFAULT_CRYSTAL_PPM
    assert refs.assumed == {"rf", "sa"}


def test_without_the_section_there_is_no_timebase(tmp_path: Path) -> None:
    assert load_bench(write(tmp_path, BENCH)).references() is None


@pytest.mark.parametrize(("section", "words"), [
    ('lo = { lock = "sa" }\nsa = { lock = "lo" }', ("timebase.lo.lock", "circle")),
    ('rf = { lock = "rf2" }', ("timebase.rf.lock", "not on the bench")),
    ('rf = { lock = "lba" }\n[timebase.external]\nlab = "1 ppb"', ("did you mean 'lab'",)),
    ('rf = { internal = "2 ppm", lock = "sa" }', ("timebase.rf", "exactly one")),
    ('rf = { internal = "-2 ppm" }', ("timebase.rf.internal", "± figure")),
    ('rf = { internal = "2 dB" }', ("timebase.rf.internal", "ppm")),
    ("[timebase.external]\nsa = 0.01", ("timebase.external.sa", "name of a role")),
])
def test_bad_timebases_are_located(tmp_path: Path, section: str, words: tuple[str, ...]) -> None:
    with pytest.raises(InputError) as info:
        load_bench(write(tmp_path, BENCH + "\n[timebase]\n" + section + "\n"))
    message = info.value.message()
    assert "bench.toml:" in message
    for word in words:
        assert word in message
