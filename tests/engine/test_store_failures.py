"""A run whose store fails stops, leaves the bench safe, says the real cause and never says
"complete": the store's folder deleted, its file replaced, the disk full, the file read-only.
Real runs on the simulated bench over pyvisa/TCP, real files, real SQLite errors."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

import sweeprig.engine.session as session
from sweeprig.engine.session import run_sequence, served_bench_text
from sweeprig.store.sqlite import SqliteRunStore
from tests.support import points_stored, skip_unless_permissions_hold

SLOW = Path(__file__).parent / "data" / "slow.toml"  # 60 points
AFTER = 3  # the store fails after this many points


def _bench(sim, folder: Path) -> Path:
    path = folder / "bench.toml"
    path.write_text(served_bench_text(sim.resources), encoding="utf-8")
    return path


def _assert_bench_safe(sim) -> None:
    for role in ("rf", "rf2", "lo"):
        assert sim.instruments[role].output_on is False, f"{role} RF still on"
    assert sim.instruments["dc"].output_on is False, "supply still on"


@pytest.fixture
def places(tmp_path, monkeypatch):
    """The store in a folder of its own; the current folder elsewhere (for the last note)."""
    cwd = tmp_path / "cwd"
    cwd.mkdir()
    monkeypatch.chdir(cwd)
    return tmp_path / "store" / "runs.sqlite", cwd


@pytest.fixture
def opened_stores(monkeypatch):
    """The stores the engine opens, so a test can reach the connection SQLite writes with."""
    opened: list[SqliteRunStore] = []

    class Recorded(SqliteRunStore):
        def __init__(self, *args, **kwargs):
            super().__init__(*args, **kwargs)
            opened.append(self)

    monkeypatch.setattr(session, "SqliteRunStore", Recorded)
    return opened


def _run(sim, tmp_path, store_path, action):
    """Run SLOW on the served bench; ``action()`` after point AFTER. Returns (outcome, points
    seen by the callback)."""
    seen: list[int] = []

    def on_point(result):
        seen.append(result.point.index)
        if len(seen) == AFTER:
            action()

    outcome = run_sequence(SLOW, _bench(sim, tmp_path), store_path=store_path,
                           on_point=on_point)
    return outcome, seen


def test_store_folder_deleted_mid_run_stops_the_run(tmp_path, sim_bench, places):
    store_path, cwd = places
    outcome, seen = _run(sim_bench, tmp_path, store_path,
                         lambda: shutil.rmtree(store_path.parent))
    assert len(seen) == AFTER  # not one more point measured
    assert outcome.status == "aborted"
    assert "folder" in outcome.reason and "disappeared" in outcome.reason
    assert outcome.store_error is not None
    assert not outcome.points_read_back and outcome.points_done == 0  # never "N of N stored"
    _assert_bench_safe(sim_bench)
    assert outcome.safe is not None and outcome.safe.ok
    assert not store_path.parent.exists()
    # nowhere beside the store: the note is in the current folder, and says why
    assert outcome.store_note == cwd / "runs.sqlite.run-1.failed.txt"
    note = outcome.store_note.read_text(encoding="utf-8")
    assert "aborted" in note and "disappeared" in note


def test_store_file_replaced_mid_run_is_detected(tmp_path, sim_bench, places):
    store_path, _cwd = places

    def replace():
        other = tmp_path / "other.bin"
        other.write_bytes(b"not yours\n")
        os.replace(other, store_path)

    outcome, seen = _run(sim_bench, tmp_path, store_path, replace)
    assert len(seen) == AFTER
    assert outcome.status == "aborted" and "replaced" in outcome.reason
    _assert_bench_safe(sim_bench)
    assert store_path.read_bytes() == b"not yours\n"  # the replacement was not written to
    assert outcome.store_note == store_path.parent / "runs.sqlite.run-1.failed.txt"
    assert "replaced" in outcome.store_note.read_text(encoding="utf-8")


def test_disk_full_mid_run_names_the_real_cause(tmp_path, sim_bench, places, opened_stores):
    store_path, _cwd = places

    def fill():
        conn = opened_stores[0]._conn
        pages = conn.execute("PRAGMA page_count").fetchone()[0]
        conn.execute(f"PRAGMA max_page_count = {pages}")  # SQLite reports SQLITE_FULL

    outcome, seen = _run(sim_bench, tmp_path, store_path, fill)
    assert outcome.status == "aborted"
    assert "disk holding the run store is full" in outcome.reason
    assert "SQLITE_FULL" in outcome.reason and "cannot rollback" not in outcome.reason
    assert "sweeprig resume" in outcome.reason
    _assert_bench_safe(sim_bench)
    # the store stays readable: the count is read back and is what was committed
    assert outcome.points_read_back and outcome.points_done == len(seen)
    with SqliteRunStore(store_path, create=False) as store:
        assert len(store.done_point_indices(1)) == len(seen)
        info = store.run(1)
    if outcome.store_note is None:  # the status fitted in the pages left
        assert info.stored_status == "aborted" and "full" in (info.reason or "")
    else:
        assert "full" in outcome.store_note.read_text(encoding="utf-8")


def test_read_only_store_mid_run_aborts_with_a_note(tmp_path, sim_bench, places,
                                                    opened_stores):
    store_path, _cwd = places
    outcome, seen = _run(sim_bench, tmp_path, store_path,
                         lambda: opened_stores[0]._conn.execute("PRAGMA query_only = ON"))
    assert len(seen) == AFTER
    assert outcome.status == "aborted" and "cannot be written" in outcome.reason
    assert "SQLITE_READONLY" in outcome.reason
    _assert_bench_safe(sim_bench)
    assert outcome.points_done == AFTER
    assert outcome.store_note == store_path.parent / "runs.sqlite.run-1.failed.txt"
    assert "cannot be written" in outcome.store_note.read_text(encoding="utf-8")


def test_store_file_made_read_only_mid_run_aborts(tmp_path, sim_bench, places):
    skip_unless_permissions_hold(tmp_path)
    store_path, _cwd = places
    outcome, seen = _run(sim_bench, tmp_path, store_path,
                         lambda: os.chmod(store_path, 0o444))
    assert len(seen) == AFTER
    assert outcome.status == "aborted" and "read-only" in outcome.reason
    _assert_bench_safe(sim_bench)
    assert outcome.store_note is not None


@pytest.fixture
def tiny_disk(tmp_path):
    """A 1 MiB tmpfs of its own (needs root and the right to mount; skipped otherwise)."""
    if os.geteuid() != 0 or shutil.which("mount") is None:
        pytest.skip("mounting a small filesystem needs root")
    folder = tmp_path / "disk"
    folder.mkdir()
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=1m", "tmpfs", str(folder)],
                          capture_output=True, text=True, check=False)
    if done.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {done.stderr.strip()}")
    try:
        yield folder
    finally:
        subprocess.run(["umount", "-l", str(folder)], capture_output=True, check=False)


def test_really_full_disk_mid_run(tmp_path, sim_bench, places, tiny_disk):
    _store_path, cwd = places
    store_path = tiny_disk / "runs.sqlite"

    def fill_the_disk():
        with (tiny_disk / "filler").open("wb") as filler:
            try:
                while True:
                    filler.write(b"\0" * 65536)
                    filler.flush()
            except OSError:
                pass

    outcome, _seen = _run(sim_bench, tmp_path, store_path, fill_the_disk)
    assert outcome.status == "aborted"
    assert "full" in outcome.reason and "cannot rollback" not in outcome.reason
    _assert_bench_safe(sim_bench)
    if outcome.store_note is not None:  # nothing could be written on that disk
        assert outcome.store_note.parent in (tiny_disk, cwd)
        assert "full" in outcome.store_note.read_text(encoding="utf-8")




@pytest.mark.slow
def test_cli_run_whose_store_folder_vanishes_exits_5_with_the_cause(tmp_path):
    store_path = tmp_path / "store" / "runs.sqlite"
    cwd = tmp_path / "cwd"
    cwd.mkdir()
    proc = subprocess.Popen(
        [sys.executable, "-m", "sweeprig", "run", str(SLOW), "--sim", "--realtime",
         "--store", str(store_path), "--quiet"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=cwd,
    )
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            if store_path.exists() and points_stored(store_path) >= 2:
                break
            assert proc.poll() is None, proc.communicate()
            time.sleep(0.05)
        else:
            pytest.fail("the run never got going")
        shutil.rmtree(store_path.parent)
        out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    text = out + err
    assert proc.returncode == 5, text
    assert "Traceback" not in text
    assert "aborted" in out and "complete" not in out.replace("incomplete", "")
    assert "disappeared" in text and "fix:" in text
    assert "points stored: unknown" in " ".join(out.split())
    note = cwd / "runs.sqlite.run-1.failed.txt"
    assert note.exists() and str(note) in "".join(out.split())  # rich wraps long lines
    assert "safe state read back" in " ".join(out.split())


