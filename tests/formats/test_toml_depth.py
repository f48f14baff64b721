"""The nesting-depth check on TOML text, before any parser sees it."""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest

import sweeprig
from sweeprig.errors import InputError
from sweeprig.formats.loading import load_document
from sweeprig.formats.toml_depth import (
    MAX_DEPTH,
    MAX_TABLE_HEADERS,
    MAX_VALUES,
    check_toml_depth,
    check_value_count,
    toml_depth_problem,
)

DEEP = MAX_DEPTH + 1


@pytest.mark.parametrize(("text", "found"), [
    ("a = 1\n", None),
    ("a.b.c = 1\n", None),
    ("x = '''[[[[['''\n", None),  # brackets in strings do not count
    ('x = """ \\""" [[[[[ """\n', None),
    ('x = "[[[[" # [[[[ in a comment\n', None),
    ("x = 1.5\ny = [1.5, 2.5, 3.5]\n", None),  # dots in numbers are no key parts
    ("x = " + "[" * 70 + "]" * 70, (1, DEEP)),
    ("a" + ".a" * 70 + " = 1", (1, DEEP)),
    ("\n[" + ".".join(["a"] * 70) + "]\n", (2, DEEP)),
    ("[[" + ".".join(["a"] * 64) + "]]\n", (1, DEEP)),  # the array of tables is a level
    ("x = " + "{a=" * 70 + "1" + "}" * 70, (1, DEEP)),
    ("x = 'it''s'\n[a]\ny = [" + "[" * 62 + "]" * 62 + "]", None),  # 64 deep: allowed
    ("[a]\ny = [" + "[" * 63 + "]" * 63 + "]", (2, DEEP)),
    ("x = [" + "{ a.b.c.d.e.f.g = [" * 10, (1, DEEP)),  # modest steps add up
])
def test_depth_problem(text: str, found: tuple[int, int] | None) -> None:
    assert toml_depth_problem(text) == found


def test_the_depth_counted_is_the_depth_tomllib_builds() -> None:
    """Levels below the document's own table: tables, arrays and inline tables alike."""

    def depth(node: object) -> int:
        if isinstance(node, dict):
            return 1 + max((depth(v) for v in node.values()), default=0)
        if isinstance(node, list):
            return 1 + max((depth(v) for v in node), default=0)
        return 0

    text = "[a.b]\nc.d = [[{ e.f = [1] }]]\n"
    levels = depth(tomllib.loads(text)) - 1  # a, b, c, [, [, {, e, [1]
    assert levels == 8
    assert toml_depth_problem(text, limit=levels) is None
    assert toml_depth_problem(text, limit=levels - 1) == (2, levels)


def test_every_shipped_file_passes() -> None:
    root = Path(sweeprig.__file__).resolve().parent.parent
    files = [p for folder in ("sequences", "drivers", "sweeprig/sim")
             for p in (root / folder).rglob("*.toml")]
    assert files
    for path in files:
        assert toml_depth_problem(path.read_text(encoding="utf-8")) is None, path


def test_a_deep_file_is_a_located_error_not_a_recursion(tmp_path: Path) -> None:
    path = tmp_path / "deep.toml"
    path.write_text("# deep\n" + "x = " + "[" * 100_000 + "]" * 100_000 + "\n",
                    encoding="utf-8")
    with pytest.raises(InputError) as caught:
        load_document(path)
    assert caught.value.where == "deep.toml:2" or caught.value.where.endswith("deep.toml:2")


def test_a_key_of_100_000_parts_is_refused_before_parsing(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="nest more than 64 levels"):
        check_toml_depth("a" + ".a" * 100_000 + " = 1\n", "deep.toml")


def test_table_headers_are_counted_before_parsing() -> None:
    """Python's TOML parser slows with the square of the number of headers (measured: 10,000
    take 0.05 s, 40,000 take 0.5 s, 100,000 take 10 s)."""
    check_toml_depth("[[study]]\n" * MAX_TABLE_HEADERS, "ok.toml")
    with pytest.raises(InputError, match="more than 20,000 table headers") as caught:
        check_toml_depth("# many\n" + "[[study]]\n" * (MAX_TABLE_HEADERS + 5), "many.toml")
    assert caught.value.where == f"many.toml:{MAX_TABLE_HEADERS + 2}"


def test_values_are_counted_after_parsing_before_validation() -> None:
    check_value_count({"x": list(range(MAX_VALUES - 1))}, "ok.toml")
    with pytest.raises(InputError, match="more than 200,000 values") as caught:
        check_value_count({"study": [{"rf_frequency": list(range(MAX_VALUES))}]}, "big.toml")
    assert "study[0].rf_frequency" in caught.value.what
