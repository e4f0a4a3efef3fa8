"""The history commands' output: tables on the console, CSV for a spreadsheet, a trend chart.

Called by station/cli/commands.py (one small function per command there); kept here so the
command line stays thin and the history's presentation lives with the history.
"""

from __future__ import annotations

import argparse
import csv
import datetime as dt
import io
import re
from pathlib import Path
from typing import Any

from rich.console import Console

from station.history.db import open_engine, resolve_url, safe_url
from station.history.queries import (RUN_COLUMNS, RunFilter, compare_runs, figure_names,
                                     list_runs, trend)
from station.report.render import format_number


def engine_for(args: argparse.Namespace) -> Any:
    return open_engine(resolve_url(explicit=args.db, station_file=args.station,
                                   runs_dir=args.runs))


def filter_of(args: argparse.Namespace) -> RunFilter:
    return RunFilter(serial=args.serial, model=args.model, station=args.station_name,
                     recipe=args.recipe, outcome=args.outcome, since=args.since,
                     until=args.until)


def _cell(v: Any) -> str:
    if isinstance(v, dt.datetime):
        return v.strftime("%Y-%m-%d %H:%M:%S")
    return format_number(v) if isinstance(v, float) else ("" if v is None else str(v))


def write_csv(console: Console, columns: list[str], rows: list[list[Any]]) -> None:
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(columns)
    writer.writerows([[_cell(c) for c in r] for r in rows])
    console.file.write(buf.getvalue())


def show_runs(args: argparse.Namespace, console: Console) -> int:
    from station.cli.console import print_table

    rows = list_runs(engine_for(args), filter_of(args), args.limit)
    table = [[r[c] for c in RUN_COLUMNS] for r in rows]
    if args.csv:
        write_csv(console, list(RUN_COLUMNS), table)
    else:
        print_table(console, f"{len(rows)} runs", ["started", "model", "serial", "recipe",
                                                   "state", "outcome", "P/M/F", "run"],
                    [[_cell(r["started_at"]), r["uut_model"], r["uut_serial"], r["recipe"],
                      r["state"], r["outcome"], f"{r['n_pass']}/{r['n_marginal']}/{r['n_fail']}",
                      r["run_uid"].split("#")[0]] for r in rows])
    return 0


def show_trend(args: argparse.Namespace, console: Console) -> int:
    from station.cli.console import print_table
    from station.history.trendplot import SUFFIX, plot_trend

    if args.plot is not None and args.plot.suffix.lower() != SUFFIX:
        console.print(f"--plot {args.plot}: the chart is written as SVG; give a file name ending "
                      f"in {SUFFIX}", highlight=False, markup=False)
        return 2
    engine = engine_for(args)
    t = trend(engine, args.figure, filter_of(args), by=args.by)
    if not t.points:
        names = figure_names(engine, args.figure.rsplit(".", 1)[-1][:12])
        console.print(f"no run in the history has the figure {args.figure!r}"
                      + (f"; similar: {', '.join(names[:12])}" if names else ""),
                      highlight=False, markup=False)
        return 2
    rows = [[_cell(p.started_at), p.serial, _cell(p.value), _cell(p.sigma),
             "OUTSIDE 3 SIGMA" if p.outlier else "", p.run_uid] for p in t.points]
    if args.csv:
        write_csv(console, ["started_at", "serial", "value", "sigma", "flag", "run_uid"], rows)
    else:
        print_table(console, f"{t.figure} ({t.unit})", ["started", "serial", "value", "sigma",
                                                        "flag", "run"], rows)
    c = t.chart
    limit = "none" if t.limit is None else f"{'<=' if t.sense == 'max' else '>='} {t.limit:g}"
    if c is not None:
        console.print(f"n={len(t.points)} mean={c.mean:.6g} sigma(moving range)={c.sigma:.4g} "
                      f"3-sigma band=[{c.lower:.6g}, {c.upper:.6g}] outliers={len(c.outliers)} "
                      f"spec limit: {limit}", highlight=False, markup=False)
    out = args.plot or args.runs / f"trend-{re.sub(r'[^A-Za-z0-9_.-]', '_', args.figure)}.svg"
    out.parent.mkdir(parents=True, exist_ok=True)
    console.print(f"plot: {plot_trend(t, out)}", highlight=False, markup=False)
    return 0


def show_compare(args: argparse.Namespace, console: Console) -> int:
    from station.cli.console import print_table

    engine = None
    if not all((Path(r) / "manifest.json").is_file() for r in (args.run_a, args.run_b)):
        engine = engine_for(args)
    uid_a, uid_b, rows = compare_runs(args.run_a, args.run_b, engine)
    table = []
    for r in rows:
        ch = r.change
        verdict = {True: "SIGNIFICANT", False: "no", None: "n/a (no u)"}[
            ch.significant]
        table.append([r.name, _pm(r.a, r.u_a), _pm(r.b, r.u_b), _cell(ch.difference),
                      _cell(ch.u_combined), _cell(ch.en), verdict, r.unit])
    columns = ["figure", "A", "B", "B - A", "u_c", "E_n", "significant", "unit"]
    if args.csv:
        write_csv(console, columns, table)
    else:
        print_table(console, f"A = {uid_a}\nB = {uid_b}", columns, table)
        console.print("significant: |B - A| > 2 u_c (E_n > 1, k = 2)", highlight=False)
    return 0


def _pm(value: float, sigma: float | None) -> str:
    return _cell(value) + ("" if sigma is None else f" +/- {format_number(sigma, 2)}")


def run_index(args: argparse.Namespace, console: Console) -> int:
    from station.history.index import index_runs, run_folders

    if not args.runs_dir.is_dir():
        raise FileNotFoundError(f"{args.runs_dir}: no such folder; give the folder that holds "
                                "the run folders (e.g. runs/)")
    url = resolve_url(explicit=args.db, station_file=args.station, runs_dir=args.runs_dir)
    summary = index_runs(open_engine(url), run_folders(args.runs_dir))
    for problem in summary.problems:
        console.print(f"skipped {problem}", highlight=False, markup=False)
    console.print(f"{safe_url(url)}: {summary.added} runs added, {summary.already} already "
                  f"recorded, {summary.unfinished} unfinished (not recorded)", highlight=False,
                  markup=False)
    return 0 if not summary.problems else 2
