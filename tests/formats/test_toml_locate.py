"""The key-path → line locator used for error messages."""

import tomllib

import pytest

from sweeprig.formats.toml_locate import KeyLocator, format_key_path

TEXT = """\
# comment with = and [brackets]
title = "a # not a comment"
[part]
id = "A"
"quoted key" = 1
a.b.c = 2

[[study]]
name = "one"
rf_frequency = { start = "1 GHz", stop = "2 GHz", step = "1 MHz" }
read = [
  "wanted",   # a comment inside an array
  { kind = "mxn", order = 3 },
]
[study.analyzer]
rbw = 3
[[study]]
name = "two"
[[study.read]]
kind = "im3"
[[study.read]]
kind = "im2"
s = '''multi
[fake]
x = 9
'''
x = 1
"""


@pytest.fixture(scope="module")
def locator() -> KeyLocator:
    tomllib.loads(TEXT)  # the fixture itself must be valid TOML
    return KeyLocator(TEXT)


@pytest.mark.parametrize(
    ("path", "line"),
    [
        (("title",), 2),
        (("part",), 3),
        (("part", "id"), 4),
        (("part", "quoted key"), 5),
        (("part", "a", "b", "c"), 6),  # dotted key
        (("study", 0), 8),  # first [[study]]
        (("study", 0, "name"), 9),
        (("study", 0, "rf_frequency", "step"), 10),  # inside an inline table
        (("study", 0, "read"), 11),
        (("study", 0, "read", 0), 12),  # array element on its own line
        (("study", 0, "read", 1, "order"), 13),  # inline table inside an array
        (("study", 0, "analyzer", "rbw"), 16),  # [study.analyzer] belongs to study 0
        (("study", 1), 17),
        (("study", 1, "read", 0, "kind"), 20),  # nested array of tables, counted per parent
        (("study", 1, "read", 1, "kind"), 22),
        (("study", 1, "read", 1, "x"), 27),  # after a multi-line string holding "[fake]"
    ],
)
def test_lines(locator: KeyLocator, path: tuple, line: int) -> None:
    assert locator.line(path) == line


def test_missing_key_falls_back_to_its_table(locator: KeyLocator) -> None:
    assert locator.line(("study", 1, "rf_power")) == 17
    assert locator.line(("study", 0, "rf_frequency", "points")) == 10
    assert locator.line(("nowhere",)) is None


def test_fake_table_inside_string_is_not_a_table(locator: KeyLocator) -> None:
    assert ("fake",) not in locator.lines


def test_format_key_path() -> None:
    assert format_key_path(("study", 1, "rf_power")) == "study[1].rf_power"
    assert format_key_path(("part", "quoted key")) == 'part."quoted key"'
