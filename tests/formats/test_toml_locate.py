"""The key-path → line locator used for error messages."""

import tomllib

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

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


STRINGS = (
    'a = "a \\"quoted\\" # not a comment, [not] a table"\n'  # 1
    "b = 'literal \\ with # and ,'\n"  # 2
    'c = """\nfirst \\""" still the string\nx = 1\n"""""\n'  # 3-6: closed by five quotes
    "d = '''\n[fake]\n''''\n"  # 7-9
    'e = [ "x\\\\", \'y\', """z\n""", 1.5e3 ]  # a comment\n'  # 10-11
    "f = { g = 'h', i = \"j,}\" }\n"  # 12
    "k = 2\n"  # 13
)


@pytest.mark.parametrize("line_end", ["\n", "\r\n"])
def test_strings_escapes_and_line_ends(line_end: str) -> None:
    text = STRINGS.replace("\n", line_end)
    assert tomllib.loads(text)["c"].startswith("first")  # valid TOML, as the loader gets
    lines = KeyLocator(text).lines
    assert [lines[(key,)] for key in "abcdefk"] == [1, 2, 3, 7, 10, 12, 13]
    assert ("x",) not in lines and ("fake",) not in lines
    assert lines[("e", 3)] == 11 and lines[("f", "i")] == 12


@pytest.mark.parametrize("tail", ['"open \\', "'''open", '"""open \\', "'open"])
def test_text_ending_inside_a_string_keeps_what_was_found(tail: str) -> None:
    lines = KeyLocator(f"a = 1\nb = {tail}").lines
    assert lines == {("a",): 1, ("b",): 2}


_KEY = st.from_regex(r"[a-z][a-z0-9_]{0,6}", fullmatch=True)
_TEXT = st.text(st.sampled_from('ab#,[]{}=\'"\\\n \t.'), max_size=12)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(_KEY, _TEXT, st.sampled_from(["basic", "long", "literal"])),
                min_size=1, max_size=6, unique_by=lambda item: item[0]))
def test_every_key_is_found_on_its_own_line_whatever_its_string_holds(items) -> None:
    """Keys with strings of awkward characters, written as TOML by the rules of the format
    (toml.io, v1.0.0: basic strings escape quotes and backslashes, multi-line basic strings
    escape quotes and drop a line break right after the opening quotes, literal strings take
    what has no single quote or line break): each key is on the line where it was
    written."""
    out: list[str] = []
    expected: dict[str, int] = {}
    for key, value, kind in items:
        if kind == "literal" and ("'" in value or "\n" in value):
            kind = "basic"
        expected[key] = sum(part.count("\n") for part in out) + 1
        escaped = value.replace("\\", "\\\\").replace('"', '\\"')
        if kind == "basic":
            out.append(f'{key} = "{escaped.replace(chr(10), chr(92) + "n")}"\n')
        elif kind == "long":
            # a line break right after the opening quotes is not part of the string
            out.append(f'{key} = """\n{escaped}"""\n')
        else:
            out.append(f"{key} = '{value}'\n")
    text = "".join(out)
    assert tomllib.loads(text) == {key: value for key, value, _ in items}
    lines = KeyLocator(text).lines
    assert {key: lines[(key,)] for key in expected} == expected
