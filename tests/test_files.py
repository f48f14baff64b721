"""The one reader of input files: regular files only, a size cap, located refusals."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from sweeprig.errors import InputError
from sweeprig.files import (
    DEFAULT_MAX_FILE_BYTES,
    DEFAULT_MAX_TOML_BYTES,
    MAX_FILE_BYTES_ENV,
    max_file_bytes,
    read_file_bytes,
    shorten_path,
)


def refusal(path: Path, **kwargs: object) -> InputError:
    with pytest.raises(InputError) as caught:
        read_file_bytes(path, **kwargs)  # type: ignore[arg-type]
    return caught.value


def test_a_regular_file_is_read_whole(tmp_path: Path) -> None:
    path = tmp_path / "a.toml"
    path.write_bytes(b"x = 1\n" * 1000)
    assert read_file_bytes(path) == b"x = 1\n" * 1000


def test_a_fifo_is_refused_by_name_without_waiting_for_a_writer(tmp_path: Path) -> None:
    fifo = tmp_path / "pipe.toml"
    os.mkfifo(fifo)
    error = refusal(fifo, what="sequence file")
    assert "FIFO" in error.what and "pipe.toml" in error.message()
    assert "regular file" in (error.fix or "")


def test_a_link_to_a_device_is_refused(tmp_path: Path) -> None:
    link = tmp_path / "zero.toml"
    link.symlink_to(os.devnull)
    assert "character device" in refusal(link).what


@pytest.mark.parametrize("loop", ["self", "pair"])
def test_a_symlink_loop_is_refused_by_name(tmp_path: Path, loop: str) -> None:
    path = tmp_path / "a.toml"
    if loop == "self":
        path.symlink_to(path.name)
    else:
        (tmp_path / "b.toml").symlink_to("a.toml")
        path.symlink_to("b.toml")
    error = refusal(path, where="bench.toml:4: include[0]", what="included file")
    assert "symlink loop" in error.what and error.where == "bench.toml:4: include[0]"


def test_a_directory_is_refused_with_what_to_give_instead(tmp_path: Path) -> None:
    error = refusal(tmp_path, expected="a .toml file")
    assert "directory" in error.what and error.fix == "give the path of a .toml file"


def test_missing_and_impossible_names(tmp_path: Path) -> None:
    assert "does not exist" in refusal(tmp_path / "nope.toml").what
    assert "NUL" in refusal(tmp_path / "a\0b.toml").what
    assert "longer than" in refusal(tmp_path / ("x" * 5000)).what


def test_the_size_cap_comes_from_the_environment(tmp_path: Path,
                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv(MAX_FILE_BYTES_ENV, raising=False)
    assert max_file_bytes() == DEFAULT_MAX_FILE_BYTES
    assert max_file_bytes(toml=True) == DEFAULT_MAX_TOML_BYTES < DEFAULT_MAX_FILE_BYTES
    path = tmp_path / "a.toml"
    path.write_bytes(b"#" * 100)
    monkeypatch.setenv(MAX_FILE_BYTES_ENV, "100")
    assert read_file_bytes(path) == b"#" * 100  # exactly at the cap: read
    monkeypatch.setenv(MAX_FILE_BYTES_ENV, "99")
    error = refusal(path)
    assert "100 bytes, above the limit of 99 bytes" in error.what
    assert MAX_FILE_BYTES_ENV in (error.fix or "")
    monkeypatch.setenv(MAX_FILE_BYTES_ENV, "lots")
    assert MAX_FILE_BYTES_ENV in refusal(path).message()


def test_a_sparse_file_of_700_mb_is_refused_from_its_size_unread(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    path = tmp_path / "huge.toml"
    with path.open("wb") as handle:
        handle.truncate(700 * 1024 * 1024)
    read: list[int] = []
    real_read = os.read
    monkeypatch.setattr(os, "read", lambda fd, n: read.append(n) or real_read(fd, n))
    assert "700.0 MiB" in refusal(path).what
    assert read == []


def test_a_file_larger_than_it_says_is_read_no_further_than_the_cap(
        monkeypatch: pytest.MonkeyPatch) -> None:
    """Files in /proc say they hold 0 bytes and hold more (Linux only)."""
    status = Path("/proc/self/status")
    if not status.is_file():
        pytest.skip("needs /proc (Linux)")
    monkeypatch.setenv(MAX_FILE_BYTES_ENV, "64")
    read: list[int] = []
    real_read = os.read

    def counting(fd: int, n: int) -> bytes:
        data = real_read(fd, n)
        read.append(len(data))
        return data

    monkeypatch.setattr(os, "read", counting)
    assert "more than 64 bytes" in refusal(status).what
    assert sum(read) == 65


def test_long_paths_keep_their_file_name() -> None:
    long = "/very" * 100 + "/the-file.toml"
    shown = shorten_path(long)
    assert shown.startswith("/very") and "the-file.toml …" not in shown
    assert "the-file.toml" in shown and len(shown) < 200
    assert shorten_path("short.toml") == "short.toml"


def test_control_characters_in_a_name_are_escaped(tmp_path: Path) -> None:
    error = refusal(tmp_path / "\x1b[2Jx.toml")
    assert "\x1b" not in error.message() and "\\x1b[2J" in error.message()
