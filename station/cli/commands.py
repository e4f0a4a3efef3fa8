"""What each `nightbench` sub-command does (argument parsing lives in station/cli/main.py)."""

from __future__ import annotations

import argparse
from collections.abc import Mapping
from pathlib import Path

from rich.console import Console

from drivers.clock import Clock, SimClock
from station.cli.console import RunConsole
from drivers.errors import InstrumentError
from analysis.verdicts import FAIL, Verdict
from station.cli import exitcodes
from station.cli.results_table import print_results
from station.engine.abort import OperatorRequests, abort_on_signals
from station.record.manifest import Manifest
from station.formatting import format_duration
from station.engine.runner import (execute, load_inputs, make_clock, new_run_folder,
                            plan_summary)


def _console_for(console: Console, plain: bool, clock: Clock | None = None) -> RunConsole:
    """The live display (plain lines when not a terminal); times in the run's clock."""
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
        with _console_for(console, args.plain, clock) as live:
            live.start(len(inputs.plan.steps), inputs.estimate.total_s)
            outcome = execute(inputs, run, clock, live, seed=args.seed, manifest=manifest)
        run.close()
        manifest.close(run.path, state=outcome.state, cause=outcome.cause, clock=clock)
    console.print(f"run {outcome.state}: {outcome.cause}", highlight=False, markup=False)
    console.print(f"run folder: {run.path}", highlight=False, markup=False)
    return _finish(console, outcome.state, outcome.verdicts)


def _finish(console: Console, state: str, verdicts: tuple[Verdict, ...]) -> int:
    """The results table of a completed run, and its exit code (failed unit: its own code)."""
    if state != "complete":
        return exitcodes.BY_STATE.get(state, exitcodes.FAULTED)
    print_results(console, verdicts, "what the run found")
    return exitcodes.UUT_FAILED if any(v.status == FAIL for v in verdicts) else exitcodes.OK


def cmd_check(args: argparse.Namespace, console: Console) -> int:
    from station.engine.bench import open_bench
    from station.cli.console import print_table

    inputs = load_inputs(args.recipe, station_path=args.station, uut_path=args.uut,
                         overrides=args.overrides)
    per_step = dict(inputs.estimate.per_step)
    rows = [(i, s.id, s.kind, _brief(s.parameters()), f"{per_step.get(s.id, 0.0):.1f}")
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
    if inputs.warnings:
        console.print("[bold yellow]Warnings:[/]", highlight=False)
        for warning in inputs.warnings:
            console.print(f"  {warning}", highlight=False, markup=False)
    console.print(f"{len(inputs.plan.steps)} steps, {inputs.estimate.frames} frames, "
                  f"{inputs.estimate.bytes / 1e6:.1f} MB; estimated real duration "
                  f"{format_duration(inputs.estimate.total_s)}", highlight=False)
    note = f" with {len(inputs.warnings)} warning(s)" if inputs.warnings else ""
    console.print(f"check passed{note}: nothing was moved", highlight=False)
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
        if args.analysis != "distortion":
            console.print("--frame works with distortion only (one grid frame); other analyses "
                          "need a RUN_FOLDER")
            return exitcodes.INVALID
        if args.geometry is None:
            console.print("--frame needs --geometry (a file describing UUT, collimator and "
                          "target; see the README)")
            return exitcodes.INVALID
        out = args.out or Path(args.frame).with_suffix("").parent / "distortion_out"
        summary = analyze_frame_file(args.frame, args.geometry, out)
        _print_summary(console, summary)
        console.print(f"results in {out}", highlight=False, markup=False)
        return exitcodes.OK
    if args.run_folder is None:
        console.print("give a RUN_FOLDER, or --frame TIFF --geometry FILE")
        return exitcodes.INVALID
    report = analyze_run_folder(args.run_folder, args.analysis, args.out, args.replace)
    for step_id, summary in report.summaries.items():
        if len(report.summaries) > 1:
            console.print(f"{step_id}:", highlight=False, markup=False)
        _print_summary(console, summary)
    console.print(f"results in {report.results_dir}", highlight=False, markup=False)
    print_results(console, report.verdicts, f"{args.analysis}: what it found")
    return (exitcodes.UUT_FAILED if any(v.status == FAIL for v in report.verdicts)
            else exitcodes.OK)


def _print_summary(console: Console, summary: Mapping[str, object]) -> None:
    for key, value in summary.items():
        text = f"{value:.6g}" if isinstance(value, float) else str(value)
        console.print(f"{key}: {text}", highlight=False, markup=False)


def cmd_resume(args: argparse.Namespace, console: Console) -> int:
    from station.engine.resume import resume_run

    state, cause, path = resume_run(args.run_folder, force=args.force, seed=args.seed,
                                    console=_console_for(console, args.plain))
    console.print(f"run {state}: {cause}", highlight=False, markup=False)
    console.print(f"run folder: {path}", highlight=False, markup=False)
    verdicts: tuple[Verdict, ...] = ()
    if state == "complete":
        from station.record.runfolder import RunFolder
        from station.record.verdicts_file import verdicts_from_journal

        verdicts = tuple(verdicts_from_journal(RunFolder.open(path).journal.completed()))
    return _finish(console, state, verdicts)


def cmd_verify(args: argparse.Namespace, console: Console) -> int:
    from station.record.verify import verify_run

    report = verify_run(args.run_folder)
    console.print(report.format(), highlight=False, markup=False)
    return exitcodes.OK if report.ok else exitcodes.VERIFY_FAILED
