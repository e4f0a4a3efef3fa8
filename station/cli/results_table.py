"""The results table printed at the end of a run and of `analyze`: what the run found."""

from __future__ import annotations

from collections.abc import Iterable

from rich.console import Console

from analysis.verdicts import Verdict
from station.cli.console import print_table
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
        rows = [(v.key, v.quantity, format_measurement(v.value, v.sigma, v.unit), _limit(v),
                 format_measurement(v.margin, v.sigma, v.unit, show_sigma=False), v.status)
                for v in items]
        print_table(console, title, ["spec key", "quantity", "measured (1 sigma)", "limit",
                                     "margin", "verdict"], rows)
    console.print(outcome_line(items), highlight=False, markup=False)
