"""Which TOML files are sequences (and which are benches, fragments or golden files).

A sequence has a ``[part]`` table and studies (``[[study]]``) or includes that bring them; a
bench file has ``[roles]``; a fragment lacks ``[part]``; a golden-figures file ends in
``.golden.toml``. A file that is not valid TOML is taken for a sequence when its text holds
``[part]`` and ``[[study]]`` (or ``include =``), so that a broken sequence fails its static
check instead of vanishing from the test run.
"""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

GOLDEN_SUFFIX = ".golden.toml"
_MAX_BYTES = 2_000_000
_PART = re.compile(r"^\s*\[\s*part\s*\]", re.MULTILINE)
_STUDY = re.compile(r"^\s*(\[\[\s*study\s*\]\]|include\s*=)", re.MULTILINE)


def is_sequence_file(path: Path) -> bool:
    """True when ``path`` is a ``.toml`` file with a sequence's shape (see the module)."""
    name = path.name.lower()
    if not name.endswith(".toml") or name.endswith(GOLDEN_SUFFIX):
        return False
    try:
        if not path.is_file() or path.stat().st_size > _MAX_BYTES:
            return False
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError):
        return False
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError:
        return bool(_PART.search(text) and _STUDY.search(text))
    if "roles" in data or not isinstance(data.get("part"), dict):
        return False
    return isinstance(data.get("study"), list) or "include" in data
