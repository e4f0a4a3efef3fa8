"""What each `nightbench` sub-command does (argument parsing lives in station/cli/main.py)."""

from __future__ import annotations

import argparse
from pathlib import Path

from rich.console import Console

from drivers.clock import SimClock
from drivers.errors import InstrumentError
from station.cli import exitcodes
from station.engine.abort import OperatorRequests, abort_on_signals
from station.cli.watching import watch_run
from station.record.manifest import Manifest
from station.formatting import format_duration
from station.engine.runner import (execute, load_inputs, make_clock, new_run_folder,
                            plan_summary)


def _console_for(console: Console, plain: bool, clock=None):
    """The live display (plain lines when not a terminal); times in the run's clock."""
    from station.cli.console import RunConsole

    return RunConsole(console, plain=True if plain else None, clock=clock)


def cmd_run(args: argparse.Namespace, console: Console) -> int:
    inputs = load_inputs(args.recipe, station_path=args.station, uut_path=args.uut,
                         overrides=args.overrides)
    clock = make_clock(inputs.station, args.realtime)
    run = new_run_folder(inputs, args.runs, clock)
    manifest = Manifest.begin(clock, inputs=run.inputs, plan=plan_summary(inputs, args.seed))
    manifest.write(run.path)
    # A late Ctrl-C (after safing, before the manifest is closed) must not leave it "running".
    with abort_on_signals(OperatorRequests()):
        watching = watch_run(_console_for(console, args.plain, clock), run, inputs.plan,
                             inputs.station, inputs.uut.serial, clock)
        with watching.console as live:
            live.start(len(inputs.plan.steps), inputs.estimate.total_s)
            outcome = execute(inputs, run, clock, live, seed=args.seed, manifest=manifest)
        watching.finished(outcome.state, outcome.cause, str(run.path))
        run.close()
        manifest.close(run.path, state=outcome.state, cause=outcome.cause, clock=clock)
    console.print(f"run {outcome.state}: {outcome.cause}", highlight=False, markup=False)
    console.print(f"run folder: {run.path}", highlight=False, markup=False)
    return exitcodes.BY_STATE.get(outcome.state, exitcodes.FAULTED)


def cmd_check(args: argparse.Namespace, console: Console) -> int:
    from station.engine.bench import open_bench
    from station.cli.console import print_table

    inputs = load_inputs(args.recipe, station_path=args.station, uut_path=args.uut,
                         overrides=args.overrides)
    per_step = dict(inputs.estimate.per_step)
    rows = [(i, s.id, s.kind, _brief(s.params), f"{per_step.get(s.id, 0.0):.1f}")
            for i, s in enumerate(inputs.plan.steps)]
    print_table(console, f"plan of {inputs.plan.recipe} on {inputs.station.name}",
                ["#", "step id", "kind", "parameters", "est. s"], rows)
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


def _brief(params: dict) -> str:
    text = ", ".join(f"{k}={v}" for k, v in params.items())
    return text if len(text) < 70 else text[:67] + "..."


def cmd_recipes(args: argparse.Namespace, console: Console) -> int:
    from sequences.library import list_builtin
    from station.cli.console import print_table

    print_table(console, "built-in recipes", ["name", "description"], list_builtin())
    return exitcodes.OK


def cmd_bench(args: argparse.Namespace, console: Console) -> int:
    from station.engine.bench import open_bench
    from station.cli.console import print_table
    from station.inputs.config import load_station

    station = load_station(args.station)
    clock = make_clock(station, None)
    rows = []
    failed = []
    try:
        with open_bench(station, clock) as bench:
            for role, inst in bench.instruments().items():
                try:
                    rows.append((role, inst.identify(), _brief(inst.snapshot())))
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


def cmd_drivers(args: argparse.Namespace, console: Console) -> int:
    from drivers.registry import list_drivers
    from station.cli.console import print_table

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
    from station.engine.resume import resume_run

    state, cause, path = resume_run(args.run_folder, force=args.force, seed=args.seed,
                                    console=_console_for(console, args.plain), watch=watch_run)
    console.print(f"run {state}: {cause}", highlight=False, markup=False)
    console.print(f"run folder: {path}", highlight=False, markup=False)
    return exitcodes.BY_STATE.get(state, exitcodes.FAULTED)


def cmd_verify(args: argparse.Namespace, console: Console) -> int:
    from station.record.verify import verify_run

    report = verify_run(args.run_folder)
    console.print(report.format(), highlight=False, markup=False)
    return exitcodes.OK if report.ok else exitcodes.VERIFY_FAILED


def cmd_monitor(args: argparse.Namespace, console: Console) -> int:
    from station.monitor.serve import serve_monitor

    return serve_monitor(args.folder, host=args.host, port=args.port, token=args.token,
                         read_only=args.read_only, console=console)
