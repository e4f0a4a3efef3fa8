"""What each `nightbench` sub-command does (argument parsing lives in station/cli/main.py).

Heavy imports (the runner, drivers, simulators, scipy, matplotlib, numpy) are made inside the
commands that need them, so `nightbench recipes` and `--help` start at once.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from typing import TYPE_CHECKING

from station.cli import exitcodes
from station.formatting import format_duration, reading_lines

if TYPE_CHECKING:
    from rich.console import Console


def _console_for(console: Console, plain: bool, clock=None):
    """The live display (plain lines when not a terminal); times in the run's clock."""
    from station.cli.console import RunConsole

    real = console.resolve() if hasattr(type(console), "resolve") else console
    return RunConsole(real, plain=True if plain else None, clock=clock)


def _transport_log_to_event_log_only() -> None:
    """During a run every retry and reconnect is an event in events.jsonl (and failures reach
    the console through the run's own messages); without a handler Python's last-resort handler
    would print them to stderr as raw dicts."""
    import logging

    logger = logging.getLogger("nightbench.transport")
    if not logger.handlers:
        logger.addHandler(logging.NullHandler())


def cmd_run(args: argparse.Namespace, console: Console) -> int:
    from station.cli import run_guard
    from station.engine.abort import OperatorRequests, abort_on_signals
    from station.engine.runner import (console_plan, execute, load_inputs, make_clock,
                                       new_run_folder, plan_summary)
    from station.record.manifest import Manifest

    inputs = load_inputs(args.recipe, station_path=args.station, uut_path=args.uut,
                         overrides=args.overrides)
    confirmation = _confirm_real_station(args, console, inputs)
    if isinstance(confirmation, int):
        return confirmation
    clock = make_clock(inputs.station, args.realtime)
    _transport_log_to_event_log_only()
    run = new_run_folder(inputs, args.runs, clock)
    manifest = Manifest.begin(clock, inputs=run.inputs, plan=plan_summary(inputs, args.seed))
    manifest.start_confirmation = confirmation
    manifest.write(run.path)
    # A late Ctrl-C (after safing, before the manifest is closed) must not leave it "running".
    with abort_on_signals(OperatorRequests()):
        with _console_for(console, args.plain, clock) as live:
            live.start(len(inputs.plan.steps), inputs.estimate.total_s, **console_plan(inputs))
            outcome = execute(inputs, run, clock, live, seed=args.seed, manifest=manifest)
        run.close()
        manifest.close(run.path, state=outcome.state, cause=outcome.cause, clock=clock)
    console.print(f"run {outcome.state}: {outcome.cause}", highlight=False, markup=False,
                  soft_wrap=True)
    if outcome.state != "complete":
        for line in run_guard.safing_lines(run_guard.read_run_events(run.path), inputs.station):
            console.print(f"  {line}", highlight=False, markup=False, soft_wrap=True)
    console.print(f"run folder: {run.path}", highlight=False, markup=False, soft_wrap=True)
    return run_guard.run_exit_code(outcome.state, outcome.cause)


def _confirm_real_station(args: argparse.Namespace, console: Console, inputs) -> str | int:
    """On a real station: refuse without --uut, show the cautions, ask (or take --yes).
    Returns how the start was confirmed, or the exit code of a refusal."""
    from station.cli import run_guard

    def say(text: str) -> None:
        console.print(text, highlight=False, markup=False, soft_wrap=True)

    if inputs.station.simulated:
        return "not needed: simulated station"
    if args.uut is None:
        say("refused: a real station needs the UUT file of the camera on the bench "
            "(--uut FILE); the demo camera file is for the simulated bench only")
        return exitcodes.INVALID
    for line in run_guard.caution_lines(inputs):
        say(line)

    confirmation = run_guard.confirm_start(say, assume_yes=args.yes, stdin=sys.stdin)
    return exitcodes.INVALID if confirmation is None else confirmation


def cmd_check(args: argparse.Namespace, console: Console) -> int:
    from drivers.clock import SimClock
    from drivers.errors import InstrumentError
    from station.cli.plan_view import folded_text, full_text
    from station.engine.bench import open_bench
    from station.engine.runner import load_inputs, make_clock

    inputs = load_inputs(args.recipe, station_path=args.station, uut_path=args.uut,
                         overrides=args.overrides)
    per_step = dict(inputs.estimate.per_step)
    steps = inputs.plan.steps
    view = full_text if args.full else folded_text
    console.print(f"plan of {inputs.plan.recipe} on {inputs.station.name}: {len(steps)} steps"
                  + ("" if args.full else " (loops folded; --full lists every step)"),
                  highlight=False, markup=False, soft_wrap=True)
    console.print(view(steps, per_step), highlight=False, markup=False, soft_wrap=True)
    if not args.no_connect:
        try:
            with open_bench(inputs.station, SimClock() if inputs.station.simulated
                            else make_clock(inputs.station, None),
                            frame_rate_hz=inputs.uut.frame_rate_hz) as bench:
                for role, inst in bench.instruments().items():
                    console.print(f"{role}: {inst.identify()}", highlight=False, markup=False)
        except InstrumentError as exc:
            console.print(f"[red]instrument not answering:[/] {exc}", highlight=False)
            return exitcodes.INSTRUMENT
    console.print(f"{len(inputs.plan.steps)} steps, {inputs.estimate.frames} frames, "
                  f"{inputs.estimate.bytes / 1e6:.1f} MB; estimated real duration "
                  f"{format_duration(inputs.estimate.total_s)}", highlight=False)
    console.print("check passed: nothing was moved", highlight=False)
    return exitcodes.OK


def cmd_recipes(args: argparse.Namespace, console: Console) -> int:
    from sequences.library import list_builtin
    from station.formatting import columns_text

    try:
        print("built-in recipes (nightbench check NAME shows the plan)")
        print(columns_text(["name", "description"], list_builtin()), flush=True)
    except BrokenPipeError:  # `nightbench recipes | head -1`: the reader has what it wanted
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
    return exitcodes.OK


def cmd_bench(args: argparse.Namespace, console: Console) -> int:
    from drivers.errors import InstrumentError
    from station.engine.bench import open_bench
    from station.engine.runner import make_clock
    from station.cli.tables import print_table
    from station.inputs.config import load_station

    station = load_station(args.station)
    clock = make_clock(station, None)
    rows = []
    failed = []
    try:
        with open_bench(station, clock) as bench:
            for role, inst in bench.instruments().items():
                try:
                    rows.append((role, inst.identify(), instrument_text(
                        role, inst.snapshot(), station)))
                except InstrumentError as exc:
                    rows.append((role, "NOT ANSWERING", str(exc)))
                    failed.append(role)
    except InstrumentError as exc:
        console.print(f"[red]could not open {exc.instrument}:[/] {exc}", highlight=False)
        return exitcodes.INSTRUMENT
    print_table(console, station.name, ["instrument", "identity", "state"], rows)
    if failed:
        console.print(f"[red]not answering: {', '.join(failed)}[/]")
        return exitcodes.INSTRUMENT
    return exitcodes.OK


def instrument_text(role: str, snapshot: dict, station) -> str:
    """One instrument's state in the shared reading format (units, no Python syntax)."""
    units = {a: lim.unit for a, lim in station.axes.items()}
    return reading_lines({role: snapshot}, axis_units=units)[0][1]


def cmd_drivers(args: argparse.Namespace, console: Console) -> int:
    from drivers.registry import list_drivers
    from station.cli.tables import print_table

    rows = [(d.name, d.kind, d.package, ", ".join(d.settings)) for d in list_drivers()]
    print_table(console, "drivers", ["name", "kind", "package", "settings"], rows)
    return exitcodes.OK


def cmd_analyze(args: argparse.Namespace, console: Console) -> int:
    from station.analyses.reanalyze import analyze_frame_file, analyze_run_folder

    if args.frame is not None:
        if args.geometry is None:
            console.print("--frame needs --geometry (a file describing UUT, collimator and "
                          "target; see the README)")
            return exitcodes.INVALID
        out = args.out or Path(args.frame).with_suffix("").parent / "distortion_out"
        summary = analyze_frame_file(args.frame, args.geometry, out)
    elif args.run_folder is not None:
        summary = analyze_run_folder(args.run_folder, args.out)
        out = args.out or Path(args.run_folder) / "results"
    else:
        console.print("give a RUN_FOLDER, or --frame TIFF --geometry FILE")
        return exitcodes.INVALID
    for key, value in summary.items():
        console.print(f"{key}: {value}", highlight=False, markup=False)
    console.print(f"results in {out}", highlight=False, markup=False)
    return exitcodes.OK


def cmd_resume(args: argparse.Namespace, console: Console) -> int:
    from station.cli import run_guard
    from station.engine.resume import resume_run

    _transport_log_to_event_log_only()
    state, cause, path = resume_run(args.run_folder, force=args.force, seed=args.seed,
                                    console=_console_for(console, args.plain))
    console.print(f"run {state}: {cause}", highlight=False, markup=False, soft_wrap=True)
    if state not in ("complete",):
        simulated = _was_simulated(path)
        for line in run_guard.safing_lines(run_guard.read_run_events(path),
                                           simulated=simulated):
            console.print(f"  {line}", highlight=False, markup=False, soft_wrap=True)
    console.print(f"run folder: {path}", highlight=False, markup=False, soft_wrap=True)
    return run_guard.run_exit_code(state, cause)


def _was_simulated(run_path: Path) -> bool:
    """Whether the run's manifest says it ran on a simulated station (unknown: assume not)."""
    from station.record.manifest import ManifestError, load_manifest

    try:
        return bool(load_manifest(run_path).plan.get("simulated", False))
    except ManifestError:
        return False


def cmd_verify(args: argparse.Namespace, console: Console) -> int:
    from station.record.verify import verify_run

    report = verify_run(args.run_folder)
    console.print(report.format(), highlight=False, markup=False)
    return exitcodes.OK if report.ok else exitcodes.VERIFY_FAILED
