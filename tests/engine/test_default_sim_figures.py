"""The default simulated bench's stated figures are kept as data (start-up time of ``check``):
the kept file must equal what the default description gives, and a stale or broken file must
fall back to reading the description, never to wrong figures."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from sweeprig.engine import sim_specs
from sweeprig.engine.sim_specs import (
    DEFAULT_STATED_PATH,
    default_stated_figures,
    stated_figures,
    with_sim_figures,
)
from sweeprig.formats.bench import load_bench
from sweeprig.sim.description import resolve_description

SIM_BENCH = Path(__file__).resolve().parents[2] / "sequences" / "benches" / "sim.toml"
REMAKE = "python -m sweeprig.engine.sim_specs"


def test_the_kept_default_figures_are_those_of_the_default_description() -> None:
    kept = default_stated_figures()
    assert kept is not None, (
        f"{DEFAULT_STATED_PATH.name} is stale (the default description or its module "
        f"changed): remake it with `{REMAKE}`")
    # compared after a JSON round trip: the file keeps every float exactly (repr)
    assert kept == json.loads(json.dumps(stated_figures(resolve_description(None))))


def test_the_bench_from_kept_figures_equals_the_bench_from_the_description() -> None:
    bench = load_bench(SIM_BENCH)
    from_kept = with_sim_figures(bench)
    from_description = with_sim_figures(bench, resolve_description(None))
    assert from_kept == from_description
    assert from_kept.analyzer is not None and from_kept.analyzer.toi is not None


@pytest.mark.parametrize("broken", ["{not json", '{"format": "other"}',
                                    '{"format": "sweeprig stated sim figures 1", '
                                    '"made_from_sha256": "0", "figures": {}}'])
def test_a_stale_or_broken_kept_file_falls_back_to_the_description(
        broken: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    bench = load_bench(SIM_BENCH)  # one load: a bench keeps its source document privately
    expected = with_sim_figures(bench, resolve_description(None))
    stale = tmp_path / "kept.json"
    stale.write_text(broken, encoding="utf-8")
    monkeypatch.setattr(sim_specs, "DEFAULT_STATED_PATH", stale)
    assert default_stated_figures() is None
    assert with_sim_figures(bench) == expected


def test_a_given_description_is_read_not_taken_from_the_kept_file() -> None:
    bench = load_bench(SIM_BENCH)
    assert with_sim_figures(bench, "clean") == with_sim_figures(bench, resolve_description("clean"))
    default = resolve_description(None)
    other = default.model_copy(update={"analyzer": default.analyzer.model_copy(
        update={"toi": default.analyzer.toi + 6.0})})
    stated = with_sim_figures(bench, other).analyzer
    assert stated is not None and stated.toi == default.analyzer.toi + 6.0
