"""The pytest plugin: ``pytest sequences/`` runs every sequence file as a test.

Registered by the ``pytest11`` entry point ``sweeprig`` (``pyproject.toml``), so it is active
wherever sweeprig is installed; ``-p no:sweeprig`` turns it off.

What it collects: ``.toml`` files with a sequence's shape (:mod:`sweeprig.seqtest.shape`:
bench files, fragments and golden files are skipped), and only from paths given on the
command line or the invocation folder, never from the project's ``testpaths`` (so a plain
``pytest`` of a project's own tests, sweeprig's included, collects no sequence and pays
nothing but a suffix check per file).

Each sequence is one item: static check, pre-flight against the named bench
(``--sequence-bench`` or the ``sweeprig_sequence_bench`` ini key; default: the simulated
bench), a run on the simulated bench (``--sequence-sim-bench`` or the
``sweeprig_sequence_sim_bench`` ini key: a shipped sim-bench name or description file;
default the nearly error-free ``clean`` one, :data:`~sweeprig.seqtest.judge.
SEQUENCE_SIM_BENCH`) with the part the sequence names (``[part] sim_part``),
judged against the sequence's own ``[[spec]]`` limits and its golden figures
(:mod:`sweeprig.seqtest.golden`). A failure prints a table of the figures that missed and by
how much. Markers: ``sequence`` on every item, and one per ``[about] tags`` entry
(``-m quick``). ``--changed-since REV`` keeps only the sequences whose files (or fragments,
golden figures, part file) changed since the git revision. JUnit XML is pytest's own
(``--junitxml``); each item records ``run_verdict`` and ``sim_part`` as properties.
"""

from __future__ import annotations

import re
import tomllib
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from sweeprig.seqtest.shape import is_sequence_file

_MARK_NAME = re.compile(r"\W")


def pytest_addoption(parser: pytest.Parser) -> None:
    group = parser.getgroup("sweeprig", "sweeprig sequence files run as tests")
    group.addoption("--changed-since", metavar="REV", default=None,
                    help="run only the sequences whose file, fragments, golden figures or "
                    "part file changed since git revision REV")
    group.addoption("--sequence-bench", metavar="BENCH", default=None,
                    help="bench file the sequences are pre-flighted against (default: the "
                    "simulated bench)")
    group.addoption("--sequence-sim-bench", metavar="NAME|FILE", default=None,
                    help="simulated bench the sequences run on: a shipped sim-bench name "
                    "('clean', 'default') or a sim-bench description file (default: clean, "
                    "nearly error-free, so the figures judged are the part's own)")
    group.addoption("--sequence-strict", action="store_true", default=False,
                    help="an inconclusive limit check fails the sequence too")
    parser.addini("sweeprig_sequence_bench", "bench file for the sequences' pre-flight "
                  "(relative to the rootdir)", default="")
    parser.addini("sweeprig_sequence_sim_bench", "simulated bench the sequences run on "
                  "(shipped name or description file relative to the rootdir)", default="")


def pytest_configure(config: pytest.Config) -> None:
    config.addinivalue_line(
        "markers", "sequence: a sweeprig sequence file run on the simulated bench")


def pytest_collect_file(file_path: Path, parent: pytest.Collector) -> pytest.File | None:
    if file_path.suffix.lower() != ".toml":
        return None
    config = parent.config
    if config.args_source == pytest.Config.ArgsSource.TESTPATHS:
        return None
    if _inside_testpaths(config, file_path) or not is_sequence_file(file_path):
        return None
    return SequenceFile.from_parent(parent, path=file_path)


def _inside_testpaths(config: pytest.Config, path: Path) -> bool:
    resolved = path.resolve()
    for entry in config.getini("testpaths"):
        root = (config.rootpath / entry).resolve()
        if resolved == root or root in resolved.parents:
            return True
    return False


def pytest_collection_modifyitems(session: pytest.Session, config: pytest.Config,
                                  items: list[pytest.Item]) -> None:
    revision = config.getoption("--changed-since")
    if not revision:
        return
    from sweeprig.errors import SweeprigError
    from sweeprig.seqtest.changed import changed_files, touched

    try:
        changed = changed_files(revision, config.rootpath)
    except SweeprigError as exc:
        raise pytest.UsageError(exc.message()) from None
    keep, drop = [], []
    for item in items:
        if isinstance(item, SequenceItem) and not touched(item.path, changed):
            drop.append(item)
        else:
            keep.append(item)
    if drop:
        config.hook.pytest_deselected(items=drop)
        items[:] = keep


class SequenceFile(pytest.File):
    """A sequence file: one item."""

    def collect(self) -> Iterator[pytest.Item]:
        item = SequenceItem.from_parent(self, name=self.path.stem)
        item.add_marker("sequence")
        for tag in _tags(self.path):
            name = _MARK_NAME.sub("_", tag.strip().lower())
            if not name or name[0].isdigit():
                name = f"tag_{name}"
            self.config.addinivalue_line("markers", f"{name}: sequences tagged {tag!r}")
            item.add_marker(name)
        yield item


def _tags(path: Path) -> tuple[str, ...]:
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8-sig"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return ()
    about = data.get("about")
    tags = about.get("tags", ()) if isinstance(about, dict) else ()
    return tuple(t for t in tags if isinstance(t, str)) if isinstance(tags, list) else ()


class SequenceFailed(Exception):
    """The sequence ran and something missed (the item's verdict says what)."""


class SequenceRefused(Exception):
    """The sequence (or its golden file) was refused before or instead of a run."""


class SequenceItem(pytest.Item):
    """Check, pre-flight, run and judge one sequence (:func:`sweeprig.seqtest.judge.
    test_sequence`)."""

    verdict: Any = None

    def runtest(self) -> None:
        from sweeprig.errors import SweeprigError
        from sweeprig.seqtest.judge import test_sequence

        bench = self.config.getoption("--sequence-bench") or self.config.getini(
            "sweeprig_sequence_bench") or None
        bench_path = None
        if bench:
            bench_path = Path(bench)
            if not bench_path.is_absolute() and not bench_path.exists():
                bench_path = self.config.rootpath / bench_path
        from sweeprig.seqtest.judge import SEQUENCE_SIM_BENCH

        sim_bench = self.config.getoption("--sequence-sim-bench") or self.config.getini(
            "sweeprig_sequence_sim_bench") or SEQUENCE_SIM_BENCH
        if Path(sim_bench).suffix.lower() == ".toml" and not Path(sim_bench).is_absolute() \
                and not Path(sim_bench).exists():
            sim_bench = str(self.config.rootpath / sim_bench)
        try:
            verdict = test_sequence(self.path, bench_path=bench_path,
                                    sim_description=sim_bench)
        except SweeprigError as exc:
            raise SequenceRefused(exc.message()) from None
        self.verdict = verdict
        self.user_properties.append(("run_verdict", verdict.run_verdict))
        self.user_properties.append(("sim_part", verdict.sim_part or "(the bench's part)"))
        self.user_properties.append(("sim_bench", str(sim_bench)))
        from sweeprig.seqtest.judge import miss_table

        if verdict.inconclusive:
            self.add_report_section("call", "inconclusive limit checks", miss_table(
                verdict.inconclusive, "inconclusive (flagged figures or uncertainty "
                "straddling a limit):"))
        if not verdict.passed(strict=bool(self.config.getoption("--sequence-strict"))):
            raise SequenceFailed()

    def repr_failure(self, excinfo: pytest.ExceptionInfo[BaseException],
                     style: Any = None) -> str:
        if isinstance(excinfo.value, SequenceRefused):
            return f"sequence {self.path.name} refused before the run:\n{excinfo.value}"
        if isinstance(excinfo.value, SequenceFailed) and self.verdict is not None:
            from sweeprig.seqtest.judge import miss_table

            v = self.verdict
            parts = [f"sequence {self.path.name}: run verdict {v.run_verdict.upper()}"
                     + (f" on sim part {v.sim_part}" if v.sim_part else "")]
            for rows, title in ((v.failed, "limits missed:"),
                                (v.golden, "golden figures missed:")):
                table = miss_table(rows, title)
                if table:
                    parts.append(table)
            if self.config.getoption("--sequence-strict") and v.inconclusive:
                parts.append(miss_table(v.inconclusive, "inconclusive (--sequence-strict):"))
            parts += [f"note: {n}" for n in v.notes[:5]]
            return "\n\n".join(parts)
        return str(super().repr_failure(excinfo))

    def reportinfo(self) -> tuple[Path, int | None, str]:
        return self.path, None, f"sequence {self.path.name}"
