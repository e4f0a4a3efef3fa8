"""The `nightbench` command line.

    nightbench run RECIPE [--station FILE] [--uut FILE] [--set NAME=VALUE] [--realtime [SPEED]]
    nightbench check RECIPE [...]          validate, expand, preflight-estimate; moves nothing
    nightbench recipes                     list built-in recipes
    nightbench bench [--station FILE]      connect to every instrument and show identity and state
    nightbench drivers                     list drivers with kind, package and settings
    nightbench analyze distortion RUN_FOLDER | --frame TIFF --geometry FILE [--out DIR]
    nightbench resume RUN_FOLDER [--force]
    nightbench verify RUN_FOLDER

Every bad input ends in a message naming the file and line and what to do, and an exit code from
station/cli/exitcodes.py, never a bare traceback.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import yaml
from rich.console import Console

from sequences.yamlsource import SourceError
from station.cli import exitcodes


def _parse_overrides(pairs: Sequence[str]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for pair in pairs:
        if "=" not in pair:
            raise SystemExit(f"--set expects NAME=VALUE, got {pair!r}")
        name, raw = pair.split("=", 1)
        out[name.strip()] = yaml.safe_load(raw)
    return out


def _common_inputs(p: argparse.ArgumentParser) -> None:
    p.add_argument("recipe", help="a built-in recipe name (see 'nightbench recipes') or a file")
    p.add_argument("--station", type=Path, default=None,
                   help="station file (default: the built-in simulated bench)")
    p.add_argument("--uut", type=Path, default=None,
                   help="UUT file (default: the demo camera of the simulated bench)")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="NAME=VALUE",
                   help="override a recipe parameter (repeatable)")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="nightbench", description=(
        "Drive a camera test bench (or its built-in simulator) through a recipe, capture, "
        "analyse and record everything in a run folder."))
    sub = parser.add_subparsers(dest="command", required=True)

    run = sub.add_parser("run", help="run a recipe")
    _common_inputs(run)
    run.add_argument("--runs", type=Path, default=Path("runs"), help="where run folders go")
    run.add_argument("--realtime", nargs="?", const=1.0, type=float, default=None,
                     metavar="SPEED", help="simulated bench only: pace simulated time against "
                     "the wall clock (1 = real time) for a demonstration")
    run.add_argument("--seed", type=int, default=1, help="seed of the simulated bench")
    run.add_argument("--plain", action="store_true", help="plain log lines, no live display")

    check = sub.add_parser("check", help="validate a recipe, print the plan and its estimate")
    _common_inputs(check)
    check.add_argument("--no-connect", action="store_true",
                       help="skip asking every instrument to answer")

    sub.add_parser("recipes", help="list the built-in recipes")

    bench = sub.add_parser("bench", help="connect to every instrument and show its state")
    bench.add_argument("--station", type=Path, default=None)

    sub.add_parser("drivers", help="list the drivers this installation knows")

    analyze = sub.add_parser("analyze", help="re-run an analysis")
    analyze.add_argument("analysis", choices=["distortion"])
    analyze.add_argument("run_folder", nargs="?", type=Path, default=None)
    analyze.add_argument("--frame", type=Path, default=None,
                         help="a standalone TIFF frame (with --geometry)")
    analyze.add_argument("--geometry", type=Path, default=None,
                         help="geometry file describing UUT, collimator and target")
    analyze.add_argument("--out", type=Path, default=None, help="output folder")

    resume = sub.add_parser("resume", help="continue an interrupted run")
    resume.add_argument("run_folder", type=Path)
    resume.add_argument("--force", action="store_true",
                        help="go on even if the station or recipe file changed")
    resume.add_argument("--seed", type=int, default=None)
    resume.add_argument("--plain", action="store_true")

    monitor = sub.add_parser("monitor", help="serve a live web page of a run or a folder of runs")
    monitor.add_argument("folder", type=Path, help="a run folder, or a folder of runs")
    monitor.add_argument("--host", default="127.0.0.1",
                         help="address to bind (default loopback; any other needs a token)")
    monitor.add_argument("--port", type=int, default=8750)
    monitor.add_argument("--token", default=None, help="access token (default: the environment "
                         "variable NIGHTBENCH_MONITOR_TOKEN; generated and printed when binding "
                         "beyond loopback without one)")
    monitor.add_argument("--read-only", action="store_true", help="no pause/continue/abort")

    verify = sub.add_parser("verify", help="check a run folder's files against its manifest")
    verify.add_argument("run_folder", type=Path)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    console = Console(stderr=False)
    from station.cli import commands

    handlers = {
        "run": commands.cmd_run, "check": commands.cmd_check, "recipes": commands.cmd_recipes,
        "bench": commands.cmd_bench, "drivers": commands.cmd_drivers,
        "analyze": commands.cmd_analyze, "resume": commands.cmd_resume,
        "verify": commands.cmd_verify, "monitor": commands.cmd_monitor,
    }
    try:
        if hasattr(args, "overrides"):
            args.overrides = _parse_overrides(args.overrides)
        return handlers[args.command](args, console)
    except SourceError as exc:
        console.print("[bold red]Input problems:[/]", highlight=False)
        for problem in exc.problems:
            console.print(f"  {problem}", highlight=False, markup=False)
        return exitcodes.INVALID
    except (FileNotFoundError, ValueError) as exc:
        console.print(f"[bold red]Input problem:[/] {exc}", highlight=False)
        return exitcodes.INVALID
    except KeyboardInterrupt:
        console.print("interrupted")
        return exitcodes.ABORTED


if __name__ == "__main__":
    sys.exit(main())
