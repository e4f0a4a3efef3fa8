"""What each `nightbench` sub-command does (argument parsing lives in station/cli/main.py).

Heavy imports (the runner, drivers, simulators, scipy, numpy) are made inside the
commands that need them, so `nightbench recipes` and `--help` start at once.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING

from station.cli import exitcodes
from station.formatting import format_duration, reading_lines

if TYPE_CHECKING:
    from rich.console import Console

    from analysis.verdicts import Verdict
    from drivers.clock import Clock
    from station.cli.console import RunConsole
    from station.engine.bench import Bench
    from station.inputs.config import StationConfig


def _console_for(console: Console, plain: bool, clock: Clock | None = None) -> RunConsole:
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
    from station.cli.watching import watch_run
    from station.engine.prechecks import check_run_inputs
    from station.record.closing import close_manifest, final_state_guard
    from station.record.manifest import Manifest

    inputs = load_inputs(args.recipe, station_path=args.station, uut_path=args.uut,
                         overrides=args.overrides)
    check_run_inputs(inputs, seed=args.seed, runs_root=args.runs)  # before any folder exists
    confirmation = _confirm_real_station(args, console, inputs)
    if isinstance(confirmation, int):
        return confirmation
    clock = make_clock(inputs.station, args.realtime)
    _say_if_mixed(inputs.station, console)
    _transport_log_to_event_log_only()
    run = new_run_folder(inputs, args.runs, clock)
    manifest = Manifest.begin(clock, inputs=run.inputs, plan=plan_summary(inputs, args.seed))
    manifest.start_confirmation = confirmation
    manifest.write(run.path)
    # A late Ctrl-C (after safing, before the manifest is closed) must not leave it "running".
    with abort_on_signals(OperatorRequests()), final_state_guard(run, manifest, clock):
        watching = watch_run(_console_for(console, args.plain, clock), run, inputs.plan,
                             inputs.station, inputs.uut.serial, clock)
        with watching.console as live:
            live.start(len(inputs.plan.steps), inputs.estimate.total_s, **console_plan(inputs))
            outcome = execute(inputs, run, clock, live, seed=args.seed, manifest=manifest)
        watching.finished(outcome.state, outcome.cause, str(run.path),
                          outcome.safing_incomplete)
        close_manifest(run, manifest, outcome.state, outcome.cause, clock)
    run.release_writer_lock()
    _after_run(console, run.path)
    console.print(f"run {outcome.state}: {outcome.cause}", highlight=False, markup=False,
                  soft_wrap=True)
    if outcome.state != "complete":
        events = run_guard.read_run_events(run.path)
        for line in run_guard.safing_lines(events, inputs.station):
            console.print(f"  {line}", highlight=False, markup=False, soft_wrap=True)
        _print_safing_incomplete(console, events)
    console.print(f"run folder: {run.path}", highlight=False, markup=False, soft_wrap=True)
    return _finish(console, outcome.state, outcome.cause, outcome.verdicts)


def _print_safing_incomplete(console: Console, events: list[dict]) -> None:
    """The loud block when safing left an instrument live (nothing when the bench is safe)."""
    from station.cli import run_guard

    for line in run_guard.safing_incomplete_block(events):
        console.print(line, style="bold red", highlight=False, markup=False, soft_wrap=True)


def _finish(console: Console, state: str, cause: str, verdicts: tuple[Verdict, ...]) -> int:
    """The results table of a completed run, and its exit code (failed unit: its own code)."""
    from analysis.verdicts import FAIL
    from station.cli import run_guard
    from station.cli.results_table import print_results

    if state != "complete":
        return run_guard.run_exit_code(state, cause)
    print_results(console, verdicts, "what the run found")
    return exitcodes.UUT_FAILED if any(v.status == FAIL for v in verdicts) else exitcodes.OK


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
    from drivers.errors import InstrumentError
    from station.cli.plan_view import folded_text, full_text
    from station.engine.bench import open_bench
    from station.engine.prechecks import check_simulated_camera
    from station.engine.runner import load_inputs, make_clock

    inputs = load_inputs(args.recipe, station_path=args.station, uut_path=args.uut,
                         overrides=args.overrides)
    check_simulated_camera(inputs)  # truth file readable, UUT format = the camera's
    per_step = dict(inputs.estimate.per_step)
    steps = inputs.plan.steps
    view = full_text if args.full else folded_text
    console.print(f"plan of {inputs.plan.recipe} on {inputs.station.name}: {len(steps)} steps"
                  + ("" if args.full else " (loops folded; --full lists every step)"),
                  highlight=False, markup=False, soft_wrap=True)
    console.print(view(steps, per_step), highlight=False, markup=False, soft_wrap=True)
    _say_if_mixed(inputs.station, console)
    if not args.no_connect:
        try:
            with open_bench(inputs.station, make_clock(inputs.station, None),
                            frame_rate_hz=inputs.uut.frame_rate_hz) as bench:
                for role, inst in bench.instruments().items():
                    console.print(f"{role}: {inst.identify()}", highlight=False, markup=False)
                problems = _harmless_problems(bench)
        except InstrumentError as exc:
            console.print(f"[red]instrument not answering:[/] {exc}", highlight=False)
            return exitcodes.INSTRUMENT
        for problem in problems:
            console.print(f"[red]{problem}[/]", highlight=False)
        if problems:
            return exitcodes.INSTRUMENT
    if inputs.warnings:
        console.print("[bold yellow]Warnings:[/]", highlight=False)
        for warning in inputs.warnings:
            console.print(f"  {warning}", highlight=False, markup=False, soft_wrap=True)
    console.print(f"{len(inputs.plan.steps)} steps, {inputs.estimate.frames} frames, "
                  f"{inputs.estimate.bytes / 1e6:.1f} MB; estimated real duration "
                  f"{format_duration(inputs.estimate.total_s)}", highlight=False)
    note = f" with {len(inputs.warnings)} warning(s)" if inputs.warnings else ""
    console.print(f"check passed{note}: nothing was moved", highlight=False)
    return exitcodes.OK


def _say_if_mixed(station: StationConfig, console: Console) -> None:
    """A station mixing real and simulated instruments runs on real time: say so."""
    from drivers.clock import mixed_station_note
    from station.engine.runner import instrument_origins

    note = mixed_station_note(*instrument_origins(station))
    if note:
        console.print(f"note: {note}", highlight=False, markup=False, soft_wrap=True)


def _harmless_problems(bench: Bench) -> list[str]:
    """Ask every harmless query of every instrument and the blackbody's safing dry run, as
    `bench` and a run will; each failure as one line."""
    from drivers.errors import InstrumentError

    problems = []
    for role, inst in bench.instruments().items():
        for label, ask in inst.harmless_queries().items():
            try:
                ask()
            except InstrumentError as exc:
                problems.append(f"{role}: {label}: {exc}")
    safing = getattr(bench.blackbody, "safing_problem", lambda: None)()
    if safing is not None and not safing.startswith("not exercised"):
        problems.append(f"blackbody safing: {safing}")
    return problems


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
    from station.cli.tables import print_table
    from station.engine.bench import open_bench
    from station.engine.runner import make_clock
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


def instrument_text(role: str, snapshot: dict, station: StationConfig) -> str:
    """One instrument's state in the shared reading format (units, no Python syntax)."""
    units = {a: lim.unit for a, lim in station.axes.items()}
    return reading_lines({role: snapshot}, axis_units=units)[0][1]


def cmd_drivers(args: argparse.Namespace, console: Console) -> int:
    from rich.table import Table

    from drivers.registry import UnknownDriverError, driver_info, list_drivers, misspelt_groups

    if getattr(args, "name", None):
        try:
            d = driver_info(args.name)
        except UnknownDriverError as exc:
            console.print(str(exc), highlight=False, markup=False)
            return exitcodes.INVALID
        console.print(f"{d.name}: {d.kind} driver from package {d.package} ({d.target})",
                      highlight=False, markup=False)
        if d.error:
            console.print(d.error, highlight=False, markup=False)
        for key, text in d.settings.items():
            console.print(f"  {key}: {text}", highlight=False, markup=False)
        return exitcodes.OK
    infos = list_drivers()
    table = Table(title="drivers")
    table.add_column("name", no_wrap=True, min_width=max((len(d.name) for d in infos), default=4))
    table.add_column("kind", no_wrap=True)
    table.add_column("package", no_wrap=True,
                     min_width=max((len(d.package) for d in infos), default=7))
    table.add_column("settings")
    for d in infos:
        table.add_row(d.name, d.kind, d.package, d.error or ", ".join(d.settings))
    console.print(table)
    if getattr(args, "check", False):
        found = misspelt_groups()
        for group in found:
            console.print(f"[red]{group}[/]", highlight=False)
        broken = [d for d in infos if d.error]
        if found or broken:
            return exitcodes.INVALID
        console.print("every installed driver loads; no misspelt entry-point group")
    return exitcodes.OK


def cmd_analyze(args: argparse.Namespace, console: Console) -> int:
    if args.frame is not None:
        if args.analysis != "distortion":  # the image-quality frame analyses, imported only here
            from station.analyses.frame_files import FRAME_ANALYSES

            if args.analysis not in FRAME_ANALYSES:
                console.print(f"--frame works with distortion, {', '.join(FRAME_ANALYSES)}; "
                              "other analyses need a RUN_FOLDER")
                return exitcodes.INVALID
        if args.geometry is None:
            console.print("--frame needs --geometry (a file describing UUT, collimator and "
                          "target; see the README)")
            return exitcodes.INVALID
        first = Path(args.frame[0])
        out = args.out or first.with_suffix("").parent / f"{args.analysis}_out"
        if args.analysis == "distortion":
            if len(args.frame) != 1:
                console.print("distortion takes one --frame")
                return exitcodes.INVALID
            from station.analyses.frame_file import analyze_frame_file

            summary = analyze_frame_file(first, args.geometry, out,
                                         plots=getattr(args, "plots", True))
        else:
            from station.analyses.frame_files import analyze_iq_frames

            summary = analyze_iq_frames(args.analysis, args.frame, args.geometry, out)
        _print_summary(console, summary)
        console.print(f"results in {out}", highlight=False, markup=False)
        return exitcodes.OK
    if args.run_folder is None:
        console.print("give a RUN_FOLDER, or --frame TIFF --geometry FILE")
        return exitcodes.INVALID
    from analysis.verdicts import FAIL
    from station.analyses.reanalyze import analyze_run_folder
    from station.cli.results_table import print_results

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
    from station.cli import run_guard
    from station.engine.resume import resume_run

    _transport_log_to_event_log_only()
    from station.cli.watching import watch_run

    state, cause, path = resume_run(args.run_folder, force=args.force, seed=args.seed,
                                    console=_console_for(console, args.plain), watch=watch_run)
    _after_run(console, path)
    console.print(f"run {state}: {cause}", highlight=False, markup=False, soft_wrap=True)
    if state not in ("complete",):
        simulated = _was_simulated(path)
        events = run_guard.read_run_events(path)
        for line in run_guard.safing_lines(events, simulated=simulated):
            console.print(f"  {line}", highlight=False, markup=False, soft_wrap=True)
        _print_safing_incomplete(console, events)
    console.print(f"run folder: {path}", highlight=False, markup=False, soft_wrap=True)
    verdicts: tuple[Verdict, ...] = ()
    if state == "complete":
        from station.record.runfolder import RunFolder
        from station.record.verdicts_file import verdicts_from_journal

        verdicts = tuple(verdicts_from_journal(RunFolder.open(path).journal.completed()))
    return _finish(console, state, cause, verdicts)


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


def _after_run(console: Console, run_path: Path) -> None:
    """The run is closed: its report and its history record (neither can fail the run)."""
    from station.report.finish import finish_run

    for line in finish_run(run_path):
        console.print(line, highlight=False, markup=False)


def cmd_report(args: argparse.Namespace, console: Console) -> int:
    from station.report.render import write_pdf, write_report

    html = write_report(args.run_folder, args.out)
    console.print(f"report: {html}", highlight=False, markup=False)
    if args.pdf:
        console.print(f"pdf: {write_pdf(html)}", highlight=False, markup=False)
    return exitcodes.OK


def cmd_index(args: argparse.Namespace, console: Console) -> int:
    from station.history.show import run_index

    return run_index(args, console)


def cmd_runs(args: argparse.Namespace, console: Console) -> int:
    from station.history.show import show_runs

    return show_runs(args, console)


def cmd_trend(args: argparse.Namespace, console: Console) -> int:
    from station.history.show import show_trend

    return show_trend(args, console)


def cmd_compare(args: argparse.Namespace, console: Console) -> int:
    from station.history.show import show_compare

    return show_compare(args, console)


def cmd_monitor(args: argparse.Namespace, console: Console) -> int:
    from station.monitor.serve import serve_monitor

    return serve_monitor(args.folder, host=args.host, port=args.port, token=args.token,
                         read_only=args.read_only, console=console)
