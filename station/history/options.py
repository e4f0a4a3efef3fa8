"""Command-line options shared by the history commands (no database import: parsing stays fast)."""

from __future__ import annotations

import argparse
import datetime as dt
from pathlib import Path


def add_database_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--db", default=None, metavar="URL",
                   help="history database URL (default: NIGHTBENCH_HISTORY_URL, the station "
                        "file's history: url, else RUNS/history.sqlite)")
    p.add_argument("--runs", type=Path, default=Path("runs"),
                   help="folder of run folders (where the default SQLite history lives)")
    p.add_argument("--station", type=Path, default=None, help="station file naming the history")


def add_filter_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--serial")
    p.add_argument("--model")
    p.add_argument("--station-name", dest="station_name")
    p.add_argument("--recipe")
    p.add_argument("--outcome", choices=["PASSED", "FAILED", "NOT JUDGED"])
    p.add_argument("--since", type=_date, help="YYYY-MM-DD (UTC)")
    p.add_argument("--until", type=_date, help="YYYY-MM-DD (UTC, exclusive)")


def _date(text: str) -> dt.datetime:
    try:
        return dt.datetime.fromisoformat(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a date; use YYYY-MM-DD") from None
