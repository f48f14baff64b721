"""Locks held by the operating system: exclusive across processes, released by the kernel when
the holder dies (kill -9 included), and never two holders even while lock files are deleted."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from sweeprig.oslock import FileLock, is_locked, read_note

HOLDER = textwrap.dedent("""
    import sys, time
    from sweeprig.oslock import FileLock
    lock = FileLock(sys.argv[1])
    assert lock.try_acquire({"run": "held by a child"})
    print("held", flush=True)
    time.sleep(600)
""")


def test_one_holder_at_a_time_in_one_process(tmp_path: Path) -> None:
    path = tmp_path / "a.lock"
    first, second = FileLock(path), FileLock(path)
    assert first.try_acquire({"run": "first"}) and first.held
    assert not second.try_acquire({"run": "second"})  # flock: two opens exclude each other
    assert is_locked(path)
    assert read_note(path) == {"run": "first"}
    first.release()
    assert not path.exists()  # deleted while still held
    assert not is_locked(path)
    assert second.try_acquire()
    second.release()
    second.release()  # idempotent


def test_a_probe_never_takes_the_lock_from_a_holder(tmp_path: Path) -> None:
    path = tmp_path / "a.lock"
    assert not is_locked(path) and not path.exists()  # probing creates nothing
    with FileLock(path) as lock:
        assert lock.try_acquire()
        for _ in range(5):
            assert is_locked(path)
        assert lock.held


def test_a_lock_file_with_any_content_holds_nothing(tmp_path: Path) -> None:
    path = tmp_path / "a.lock"
    path.write_bytes(b'{"run": "run 7", "pid": 1}' + b"\xff" * 10_000)
    assert not is_locked(path)
    assert read_note(path) is None  # unreadable note: no guess about anyone
    lock = FileLock(path)
    assert lock.try_acquire({"run": "mine"})
    assert read_note(path) == {"run": "mine"}  # the old content is gone, not appended to
    lock.release()


@pytest.mark.skipif(os.name == "nt", reason="kill -9 is POSIX")
def test_another_process_holds_it_until_killed_then_it_is_free_at_once(tmp_path: Path) -> None:
    path = tmp_path / "a.lock"
    child = subprocess.Popen([sys.executable, "-c", HOLDER, str(path)],
                             stdout=subprocess.PIPE, text=True)
    try:
        assert child.stdout is not None and child.stdout.readline().strip() == "held"
        assert is_locked(path)
        assert read_note(path) == {"run": "held by a child"}
        assert not FileLock(path).try_acquire()
        child.send_signal(signal.SIGKILL)
        child.wait(timeout=30)
        assert path.exists()  # a killed holder leaves its file behind...
        assert not is_locked(path)  # ...but the kernel released the lock with the process
        lock = FileLock(path)
        assert lock.try_acquire()  # no stale-lock detection, no waiting
        lock.release()
    finally:
        if child.poll() is None:
            child.kill()
            child.wait(timeout=30)
        if child.stdout is not None:
            child.stdout.close()


CONTENDER = textwrap.dedent("""
    import os, sys
    from sweeprig.oslock import FileLock
    path, flag, rounds = sys.argv[1], sys.argv[2], int(sys.argv[3])
    got = 0
    for _ in range(rounds):
        lock = FileLock(path)
        if not lock.try_acquire({"pid": os.getpid()}):
            continue
        # Inside: nobody else may be. O_EXCL fails if another holder is in here too.
        fd = os.open(flag, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
        os.close(fd)
        os.unlink(flag)
        got += 1
        lock.release()  # deletes the lock file while holding it
    print(got)
""")


def test_never_two_holders_while_lock_files_come_and_go(tmp_path: Path) -> None:
    # Four processes take and release one lock (deleting its file each time) as fast as they
    # can; a second holder would find the flag file and fail with FileExistsError.
    path, flag = tmp_path / "a.lock", tmp_path / "inside"
    procs = [subprocess.Popen([sys.executable, "-c", CONTENDER, str(path), str(flag), "300"],
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
             for _ in range(4)]
    results = [p.communicate(timeout=120) for p in procs]
    for proc, (_out, err) in zip(procs, results, strict=True):
        assert proc.returncode == 0, err
    assert sum(int(out) for out, _ in results) > 0
