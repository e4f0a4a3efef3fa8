"""The `nightbench` command line.

    nightbench run RECIPE [--station FILE] [--uut FILE] [--set NAME=VALUE] [--realtime [SPEED]]
                   [--yes]                 real station: unattended start, no question asked
    nightbench --version
    nightbench check RECIPE [--full] [...] validate, expand, preflight-estimate; moves nothing
    nightbench recipes                     list built-in recipes
    nightbench bench [--station FILE]      connect to every instrument and show identity and state
    nightbench drivers [NAME] [--check]    list drivers (or one driver's settings); --check
                                           also reports misspelt entry-point groups
    nightbench analyze NAME RUN_FOLDER [--out DIR | --replace]   re-run a registered analysis
    nightbench analyze distortion --frame TIFF --geometry FILE [--out DIR]
    nightbench analyze mtf|noise3d|badpixels --frame TIFF [--frame TIFF] --geometry FILE
    nightbench resume RUN_FOLDER [--force]
    nightbench verify RUN_FOLDER
    nightbench simulate [--station FILE] [--seed N] [--out FILE]   serve the simulated bench
    nightbench report RUN_FOLDER [--pdf]   write the run's report.html (and report.pdf)
    nightbench index RUNS_DIR              record every finished run in the history (idempotent)
    nightbench runs [filters] [--csv]      list recorded runs
    nightbench trend FIGURE [filters]      one figure over time or across serials, with a chart
    nightbench compare RUN_A RUN_B         two runs figure by figure, with significance

Only argparse is imported before the arguments are parsed; each command imports what it needs.
Every bad input ends in a message naming the file and line and what to do, and an exit code from
station/cli/exitcodes.py, never a bare traceback (`nightbench --debug ...` shows it).
"""

from __future__ import annotations

import argparse
import errno
import math
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from station import __version__
from station.cli import exitcodes

if TYPE_CHECKING:
    from rich.console import Console


class ArgumentProblem(ValueError):
    """A command-line argument that cannot be used (exit code 2)."""


def _parse_overrides(pairs: Sequence[str]) -> dict[str, Any]:
    import yaml

    out: dict[str, Any] = {}
    for pair in pairs:
        if "=" not in pair:
            raise ArgumentProblem(f"--set {pair}: expected NAME=VALUE (for example --set "
                                  "frames=50)")
        name, raw = pair.split("=", 1)
        if not name.strip():
            raise ArgumentProblem(f"--set {pair}: the parameter name before '=' is missing")
        from sequences.yamlsource import SourceError, bounded_safe_load

        try:
            out[name.strip()] = bounded_safe_load(raw, source=f"--set {name.strip()}")
        except SourceError:
            raise
        except yaml.YAMLError as exc:
            mark = getattr(exc, "problem", None) or str(exc).splitlines()[0]
            raise ArgumentProblem(f"--set {pair}: the value is not valid YAML ({mark}); quote "
                                  "text, write lists as [1, 2]") from None
    return out


def _speed(text: str) -> float:
    """--realtime SPEED: finite and above zero (argparse reports the problem, exit code 2)."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not (math.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"{text!r}: give a finite speed above 0 (1 = real "
                                         "time)")
    return value


def _seed(text: str) -> int:
    from station.engine.prechecks import check_seed

    try:
        return check_seed(int(text))
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc).removeprefix("--seed ")) from None


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
    parser.add_argument("--version", action="version", version=f"nightbench {__version__}")
    parser.add_argument("--debug", action="store_true",
                        help="show the full traceback of an error instead of one line")
    sub = parser.add_subparsers(dest="command", required=True)

    run = sub.add_parser("run", help="run a recipe")
    _common_inputs(run)
    run.add_argument("--runs", type=Path, default=Path("runs"), help="where run folders go")
    run.add_argument("--realtime", nargs="?", const=1.0, type=_speed, default=None,
                     metavar="SPEED", help="simulated bench only: pace simulated time against "
                     "the wall clock (1 = real time) for a demonstration")
    run.add_argument("--seed", type=_seed, default=1, help="seed of the simulated bench")
    run.add_argument("--plain", action="store_true", help="plain log lines, no live display")
    run.add_argument("--yes", action="store_true",
                     help="real station: start without asking (unattended start; recorded in "
                     "the manifest)")

    check = sub.add_parser("check", help="validate a recipe, print the plan and its estimate")
    _common_inputs(check)
    check.add_argument("--no-connect", action="store_true",
                       help="skip asking every instrument to answer")
    check.add_argument("--full", action="store_true",
                       help="list every step of the plan (default: loops folded)")

    sub.add_parser("recipes", help="list the built-in recipes")

    bench = sub.add_parser("bench", help="connect to every instrument and show its state")
    bench.add_argument("--station", type=Path, default=None)

    drivers = sub.add_parser("drivers", help="list the drivers this installation knows")
    drivers.add_argument("name", nargs="?", default=None, help="show one driver's settings")
    drivers.add_argument("--check", action="store_true",
                         help="also report broken drivers and misspelt entry-point groups")

    from station.analyses.builtin import BUILTIN_NAMES

    analyze = sub.add_parser("analyze", help="re-run an analysis on a finished run (results to "
                             "a new RUN/reanalysis/<n>/ unless --replace or --out)")
    analyze.add_argument("analysis", choices=sorted(BUILTIN_NAMES))
    analyze.add_argument("run_folder", nargs="?", type=Path, default=None)
    analyze.add_argument("--frame", type=Path, default=None, action="append",
                         help="a standalone TIFF frame or stack (with --geometry); badpixels "
                              "takes two: the cool flat's stack, then the warm one's")
    analyze.add_argument("--geometry", type=Path, default=None,
                         help="geometry file describing UUT, collimator and target")
    analyze.add_argument("--out", type=Path, default=None,
                         help="output folder (outside any run folder)")
    analyze.add_argument("--replace", action="store_true",
                         help="write over the run's own results/ and plots/")
    analyze.add_argument("--no-plots", dest="plots", action="store_false",
                         help="with --frame: write the results only, draw no plots")

    resume = sub.add_parser("resume", help="continue an interrupted run")
    resume.add_argument("run_folder", type=Path)
    resume.add_argument("--force", action="store_true",
                        help="go on even if the station or recipe file changed")
    resume.add_argument("--seed", type=_seed, default=None)
    resume.add_argument("--plain", action="store_true")

    from station.cli.simulate import add_parser as add_simulate

    add_simulate(sub)

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
    _history_commands(sub)
    for command in sub.choices.values():  # --debug also after the sub-command
        command.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                             help="show the full traceback of an error instead of one line")
    return parser


class _LazyConsole:
    """A rich Console made on first use: listings printed as plain text never load rich."""

    def __init__(self) -> None:
        self._console: Any = None

    def resolve(self) -> Any:
        """The rich Console itself (for rich objects that use it as a context manager)."""
        if self._console is None:
            from rich.console import Console

            self._console = Console(stderr=False)
        return self._console

    def __getattr__(self, name: str) -> Any:
        return getattr(self.resolve(), name)


def _history_commands(sub: Any) -> None:
    """report, index, runs, trend, compare: the run's report and the history's questions."""
    from station.history.options import add_database_options, add_filter_options

    report = sub.add_parser("report", help="write a run folder's report.html")
    report.add_argument("run_folder", type=Path)
    report.add_argument("--out", type=Path, default=None, help="HTML file (default: in the run)")
    report.add_argument("--pdf", action="store_true", help="also write report.pdf ([pdf] extra)")
    index = sub.add_parser("index", help="record every finished run of a folder in the history")
    index.add_argument("runs_dir", type=Path)
    index.add_argument("--db", default=None, metavar="URL", help="history database URL")
    index.add_argument("--station", type=Path, default=None, help="station file naming it")
    runs = sub.add_parser("runs", help="list and filter the recorded runs")
    add_database_options(runs)
    add_filter_options(runs)
    runs.add_argument("--limit", type=int, default=None)
    runs.add_argument("--csv", action="store_true", help="CSV on standard output")
    trend = sub.add_parser("trend", help="one figure over time or across serials")
    trend.add_argument("figure", help="a figure name, e.g. netd_mk or distortion.efl_mm")
    add_database_options(trend)
    add_filter_options(trend)
    trend.add_argument("--by", choices=["time", "serial"], default="time")
    trend.add_argument("--plot", type=Path, default=None, help="SVG file for the chart (.svg)")
    trend.add_argument("--csv", action="store_true")
    compare = sub.add_parser("compare", help="two runs figure by figure")
    compare.add_argument("run_a", help="run folder or recorded run id")
    compare.add_argument("run_b")
    add_database_options(compare)
    compare.add_argument("--csv", action="store_true")


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    # imported after parsing, so `--help` and `--version` answer at once
    from station.cli import commands

    console = _LazyConsole()

    handlers = {
        "run": commands.cmd_run, "check": commands.cmd_check, "recipes": commands.cmd_recipes,
        "bench": commands.cmd_bench, "drivers": commands.cmd_drivers,
        "analyze": commands.cmd_analyze, "resume": commands.cmd_resume,
        "verify": commands.cmd_verify, "report": commands.cmd_report,
        "index": commands.cmd_index, "runs": commands.cmd_runs, "trend": commands.cmd_trend,
        "compare": commands.cmd_compare, "monitor": commands.cmd_monitor,
    }
    handlers.update(extra_handlers())
    try:
        if hasattr(args, "overrides"):
            args.overrides = _parse_overrides(args.overrides)
        return handlers[args.command](args, console)
    except Exception as exc:
        if getattr(args, "debug", False):
            raise
        return report_error(exc, console)
    except KeyboardInterrupt:
        console.print("interrupted")
        return exitcodes.ABORTED


def extra_handlers() -> dict[str, Any]:
    """Sub-commands that live in their own modules (imported only when that command runs)."""

    def simulate(args: argparse.Namespace, console: Any) -> int:
        from station.cli.simulate import cmd_simulate

        return cmd_simulate(args, console)

    return {"simulate": simulate}


def report_error(exc: BaseException, console: Console) -> int:
    """One line (or one line per input problem) and an exit code; never a traceback.

    Input problems (files, arguments, a refused resume, a busy run folder) exit 2; a full disk
    ends the run faulted (1); anything else is an internal error (1) that --debug shows in full.
    """
    from sequences.yamlsource import SourceError

    def say(text: str) -> None:
        console.print(text, highlight=False, markup=False, soft_wrap=True)

    if isinstance(exc, SourceError):
        console.print("[bold red]Input problems:[/]", highlight=False)
        for problem in exc.problems:
            say(f"  {problem}")
        return exitcodes.INVALID
    if isinstance(exc, OSError) and exc.errno in (errno.ENOSPC, errno.EDQUOT):
        say(f"Disk full: {exc}; the run folder records where it stopped. Free some space, "
            "then resume the run.")
        return exitcodes.FAULTED
    if isinstance(exc, OSError):
        where = f" {exc.filename}" if exc.filename else ""
        say(f"Input problem: cannot use{where}: {exc.strerror or exc}")
        return exitcodes.INVALID
    if isinstance(exc, RecursionError):
        say("Input problem: an input is nested too deeply to read; simplify it")
        return exitcodes.INVALID
    if isinstance(exc, MemoryError):
        say("Input problem: an input asks for more memory than this machine has; reduce its "
            "sizes (grid, frames, steps)")
        return exitcodes.INVALID
    if isinstance(exc, ValueError) or _is_input_error(exc):
        say(f"Input problem: {exc}")
        return exitcodes.INVALID
    say(f"Internal error: {type(exc).__name__}: {exc} (run again with --debug for the "
        "traceback and please report it)")
    return exitcodes.FAULTED


def _is_input_error(exc: BaseException) -> bool:
    """Errors of the record and store layers that say what is wrong with a given folder/file."""
    names = {"RunFolderError", "ManifestError", "JournalError", "FrameStoreError",
             "ResultsError", "GeometryError", "HistoryError", "NotARunFolder"}
    return any(cls.__name__ in names for cls in type(exc).__mro__)


if __name__ == "__main__":
    sys.exit(main())
