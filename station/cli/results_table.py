"""The results table printed at the end of a run and of `analyze`: what the run found."""

from __future__ import annotations

from collections.abc import Iterable

from rich.console import Console
from rich.table import Table

from analysis.verdicts import Verdict
from station.formatting import format_measurement
from station.record.verdicts_file import outcome_line

__all__ = ["print_results"]


def _limit(v: Verdict) -> str:
    sign = "<=" if v.sense == "max" else ">="
    return f"{sign} {v.limit:g} {v.unit}".rstrip()


def print_results(console: Console, verdicts: Iterable[Verdict], title: str = "results") -> None:
    """Each verdict (value +/- uncertainty, limit, margin, status), then the one-line outcome."""
    items = list(verdicts)
    if items:
        table = Table(title=title)
        table.add_column("spec key", overflow="fold")
        table.add_column("quantity", min_width=10)
        for name in ("measured (1 sigma)", "limit", "margin"):
            table.add_column(name, overflow="fold")
        table.add_column("verdict", no_wrap=True, min_width=8)
        for v in items:
            table.add_row(v.key, v.quantity, format_measurement(v.value, v.sigma, v.unit),
                          _limit(v), format_measurement(v.margin, v.sigma, v.unit,
                                                        show_sigma=False), v.status)
        console.print(table)
    console.print(outcome_line(items), highlight=False, markup=False)
