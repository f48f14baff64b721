"""The terminal classes of rich (``Console``, ``Text``, ``Table``, markup ``escape``), loaded on
first use: the command modules are all imported when the command line starts, and rich's
console costs tens of milliseconds that ``--help`` and ``check`` need not pay for."""

from __future__ import annotations

from typing import TYPE_CHECKING

from sweeprig.lazy import lazy_names

if TYPE_CHECKING:
    from rich.console import Console as Console
    from rich.markup import escape as escape
    from rich.table import Table as Table
    from rich.text import Text as Text

__getattr__ = lazy_names(__name__, {"Console": "rich.console", "Text": "rich.text",
                                    "Table": "rich.table", "escape": "rich.markup"}, globals())
