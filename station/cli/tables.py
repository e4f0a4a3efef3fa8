"""Titled tables of plain cells for the short listings (recipes, drivers, bench).

Its own module so the listing commands load only rich's table, not the live display.
"""

from __future__ import annotations

from typing import Any

from rich.console import Console
from rich.table import Table


def print_table(console: Console, title: str, columns: list[str] | tuple[str, ...],
                rows: list[Any] | tuple[Any, ...]) -> None:
    """A titled table of plain cells (every cell shown with str())."""
    table = Table(title=title)
    for c in columns:
        table.add_column(c)
    for r in rows:
        table.add_row(*[str(x) for x in r])
    console.print(table)
