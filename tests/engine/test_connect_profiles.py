"""Opening a bench: a profile of the wrong kind for a role is refused at the bench file's line
before anything is opened, and the drivers get the bench file's limits with their origin."""

from __future__ import annotations

from pathlib import Path
from typing import Any
from unittest import mock

import pytest

import sweeprig.engine.connect as connect
from sweeprig.engine.connect import open_bench
from sweeprig.errors import InputError
from sweeprig.formats.bench import load_bench

BENCH = """\
format = 1
[bench]
name = "wrong kind (fictional)"
[roles]
rf = { resource = "TCPIP0::192.0.2.1::5025::SOCKET", profile = "scpi-source" }
sa = { resource = "TCPIP0::192.0.2.2::5025::SOCKET", profile = "scpi-source" }
"""


def test_a_source_profile_on_the_analyzer_role_is_refused_before_connecting(
        tmp_path: Path) -> None:
    path = tmp_path / "bench.toml"
    path.write_text(BENCH, encoding="utf-8")
    bench = load_bench(path)

    def no_connection(*_args: Any, **_kwargs: Any) -> Any:
        raise AssertionError("a transport was opened")

    with mock.patch.object(connect, "VisaTransport", no_connection), \
            pytest.raises(InputError) as info:
        open_bench(bench, {"sa": "the analyzer"})
    error = info.value
    assert error.where is not None and error.where.endswith("bench.toml:6: roles.sa.profile")
    assert "drives a source" in error.what and "takes an analyzer profile" in error.what
    assert "'scpi-analyzer'" in (error.fix or "")
