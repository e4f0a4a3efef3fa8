"""Run, check and resume: load the inputs, open the bench, execute the plan, write the record.

This is the glue the command line calls. Everything it needs is passed in explicitly.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path


from drivers.clock import Clock, choose_clock
from drivers.errors import InstrumentError
from sequences.estimate import Estimate, estimate
from sequences.library import find_recipe
from sequences.plan import Plan, expand
from sequences.plansteps import BlackbodyStep, MoveStep, PlanStep, TargetStep
from sequences.recipe import load_recipe
from station.engine.abort import OperatorRequests, abort_on_signals
from station.analyses.builtin import builtin_registry
from station.analyses.plan_check import recipe_facts
from station.analyses.registry import Registry
from station.record.atomic import check_free_space
from station.engine.bench import Bench, open_bench
from station.formatting import format_duration
from station.inputs.config import BUILTIN_DIR, StationConfig, load_station
from station.engine.sequencer import PreflightFailed, RunOutcome, Sequencer
from station.engine.steps import StepContext
from station.engine.timing import timing_model
from station.engine.prechecks import check_frame_format
from station.inputs.uut_file import load_uut, spec_sources
from station.analyses.spec_check import spec_findings
from sequences.yamlsource import Problem, SourceError, SourceRef
from station.record.verdicts_file import verdicts_from_journal, write_verdicts
from station.record.manifest import Manifest
from station.record.runfolder import RunFolder
from station.engine.ports import Console, Emit, EventSink
from analysis.uut import UutSpec
from sequences.recipe import Recipe
from collections.abc import Callable
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from simulators.faults import FaultPlan

DEMO_UUT = BUILTIN_DIR / "demo_uut.yaml"
DISK_MARGIN_BYTES = 200 * 1024 * 1024


@dataclass
class Inputs:
    """Validated inputs of one run: nothing has been opened or moved yet."""

    station: StationConfig
    uut: UutSpec
    uut_path: Path
    recipe_path: Path
    recipe: Recipe
    plan: Plan
    estimate: Estimate
    overrides: Mapping[str, object] = field(default_factory=dict)
    analyses: Registry = field(default_factory=builtin_registry)
    warnings: list[Problem] = field(default_factory=list)  # shown by check and preflight


def load_inputs(recipe: str | Path, *, station_path: Path | None, uut_path: Path | None,
                overrides: Mapping[str, object]) -> Inputs:
    """Load and validate station, UUT and recipe; raises SourceError (all problems) if bad."""
    station = load_station(station_path)
    uut_file = Path(uut_path) if uut_path is not None else DEMO_UUT
    uut = load_uut(uut_file)
    recipe_path = find_recipe(recipe)
    registry = builtin_registry()
    parsed = load_recipe(recipe_path, overrides=dict(overrides),
                         facts=recipe_facts(station, registry))
    plan = expand(parsed)
    problems, warnings = spec_findings(uut, spec_sources(uut_file),
                                       SourceRef(str(uut_file), 1, 1), plan.steps, registry)
    if problems:
        raise SourceError(problems)
    timing = timing_model(station, frame_rate_hz=uut.frame_rate_hz,
                          frame_shape=(uut.height, uut.width))
    planned = estimate(plan, timing)
    warnings.extend(w.as_problem() for w in planned.warnings)
    return Inputs(station, uut, uut_file, recipe_path, parsed, plan, planned,
                  dict(overrides), registry, sorted(warnings, key=_place))


def _place(problem: Problem) -> tuple[str, int, int]:
    return (problem.where.file, problem.where.line, problem.where.column)


def instrument_origins(station: StationConfig) -> tuple[list[str], list[str]]:
    """(simulated roles, real roles) of a station, from the instruments' resources.

    A camera replaying recorded frames (`replay:`) runs on whatever clock the rest of the bench
    needs: it counts as simulated, so a simulated bench replaying a run stays in simulated time.
    """
    sim = [r for r, e in station.instruments.items()
           if station.simulated and (e.resource.startswith("sim")
                                     or (r == "camera" and e.resource.startswith("replay:")))]
    return sim, [r for r in station.instruments if r not in sim]


def make_clock(station: StationConfig, realtime_speed: float | None) -> Clock:
    """The clock follows the instruments: any real one means real time (choose_clock); a bench
    served by `nightbench simulate` keeps its own simulated time."""
    from station.engine.served import is_served, served_clock

    if station.simulated and is_served(station):
        return served_clock(station)
    sim, real = instrument_origins(station)
    return choose_clock(not real, realtime_speed)


def preflight(inputs: Inputs, bench: Bench, run_dir: Path, emit: Emit, console: Console,
              expected_identities: Mapping[str, str] | None = None) -> None:
    """Before anything moves: instruments answer (the same ones, when resuming), setpoints
    within the station's limits and accepted by each instrument itself, the blackbody's safing
    commands work (its dry run), disk is enough."""
    for role, inst in bench.instruments().items():
        try:
            identity = inst.identify()
        except InstrumentError as exc:
            raise PreflightFailed(f"{role} does not answer: {exc}") from exc
        expected = (expected_identities or {}).get(role)
        if expected is not None and expected != identity:
            raise PreflightFailed(f"{role} is not the instrument this run started with (was "
                                  f"{expected!r}, now {identity!r}); reconnect the original, or "
                                  "resume with --force if the replacement is intended")
        bench.identities[role] = identity
        emit("preflight.identity", instrument=role, identity=identity)
    try:  # the analysis reads frames with the UUT file's geometry: they must agree
        check_frame_format(bench.camera.shape, inputs.uut, "the camera")
    except ValueError as exc:
        raise PreflightFailed(str(exc)) from None
    limits = inputs.station.limits
    for step in inputs.plan.steps:
        refusals = []
        if isinstance(step, BlackbodyStep):
            refusals.append(limits.setpoint_problem(step.mode, step.setpoint))
        elif isinstance(step, MoveStep):
            refusals.extend(limits.position_problem(a, v) for a, v in step.position.items())
        for refusal in refusals:
            if refusal is not None:
                raise PreflightFailed(f"{step.id} ({step.source}): {refusal.message}; "
                                      f"{refusal.hint}")
    ask_instruments(inputs.plan.steps, bench)
    safing = bench.blackbody.safing_problem()
    if safing is not None and not safing.startswith("not exercised"):
        raise PreflightFailed(f"blackbody safing dry run: {safing}; the bench could not be made "
                              "safe this way: fix the blackbody's safing commands in the station "
                              f"file ({inputs.station.path}) and run 'nightbench check'")
    for warning in inputs.warnings:
        emit("preflight.warning", text=str(warning))
        console.log("warning", str(warning))
    try:
        check_free_space(run_dir, int(inputs.estimate.bytes), DISK_MARGIN_BYTES)
    except OSError as exc:
        raise PreflightFailed(str(exc)) from exc
    emit("preflight.passed", estimate_s=inputs.estimate.total_s, bytes=int(inputs.estimate.bytes),
         frames=inputs.estimate.frames)
    console.log("info", f"preflight passed: {len(inputs.plan.steps)} steps, "
                f"{inputs.estimate.frames} frames, estimated {format_duration(inputs.estimate.total_s)}")


def instrument_refusal(step: PlanStep, bench: Bench) -> str | None:
    """Why the instrument itself refuses this step (its own declared ranges, slots, axes), or
    None. Pure checks: nothing is sent to the instrument."""
    if isinstance(step, BlackbodyStep):
        return bench.blackbody.setpoint_problem(step.mode, step.setpoint)
    if isinstance(step, MoveStep):
        for axis, value in step.position.items():
            problem = bench.stage.position_problem(axis, float(value))
            if problem is not None:
                return problem
        return None
    if isinstance(step, TargetStep):
        by_name = {name: slot for slot, name in bench.wheel.slot_names().items()}
        slot = by_name.get(step.target)
        if slot is None:
            return (f"no slot named {step.target!r}; slots are "
                    f"{', '.join(repr(n) for n in by_name) or 'none'}")
        return bench.wheel.slot_problem(slot)
    return None


def ask_instruments(steps: Sequence[PlanStep], bench: Bench) -> None:
    """Preflight asks each instrument about every step it will be given (blackbody setpoints,
    stage moves and scan poses, wheel targets), before anything moves; the first refusal stops
    the run with the step, its recipe file:line and the instrument's own reason."""
    roles = {BlackbodyStep: "blackbody", MoveStep: "stage", TargetStep: "wheel"}
    for step in steps:
        problem = instrument_refusal(step, bench)
        if problem is not None:
            role = roles.get(type(step), step.kind)
            raise PreflightFailed(f"{step.id} ({step.source}): the {role} refuses: {problem}; "
                                  "change the recipe or the station file's limits")


def console_plan(inputs: Inputs, done_ids: Mapping[str, object] | None = None
                 ) -> dict[str, object]:
    """What the console's `start` needs: per-step estimates (plan order), the 1-based numbers of
    steps already done, and the stage axes' units."""
    per_step = dict(inputs.estimate.per_step)
    done = done_ids or {}
    return {"per_step_s": [float(per_step.get(s.id, 0.0)) for s in inputs.plan.steps],
            "done": [i for i, s in enumerate(inputs.plan.steps, start=1) if s.id in done],
            "axis_units": {a: lim.unit for a, lim in inputs.station.axes.items()}}


def plan_summary(inputs: Inputs, seed: int) -> dict[str, object]:
    """What the manifest records about the plan (resume reads it back)."""
    return {"recipe": inputs.plan.recipe, "station": inputs.station.name,
            "uut_serial": inputs.uut.serial, "overrides": dict(inputs.overrides), "seed": seed,
            "steps": len(inputs.plan.steps), "frames": inputs.estimate.frames,
            "estimate_s": inputs.estimate.total_s, "simulated": inputs.station.simulated}


def execute(inputs: Inputs, run: RunFolder, clock: Clock, console: Console, *, seed: int,
            completed: Mapping[str, object] | None = None,
            fault_plan: FaultPlan | None = None, manifest: Manifest | None = None,
            expected_identities: Mapping[str, str] | None = None) -> RunOutcome:
    """Open the bench and run the plan into `run` (a RunFolder). Always leaves the bench safe."""
    requests = OperatorRequests()
    emit = run.events.emit

    def log(level: str, text: str) -> None:
        emit("log", level=level, text=text)
        console.log(level, text)

    from station.engine.served import attach_time_keeper

    attach_time_keeper(run, clock, inputs.plan, completed)
    with abort_on_signals(requests, notify=lambda m: log("warning", m)):
        try:
            with open_bench(inputs.station, clock, events=io_sink(run.events),
                            frame_rate_hz=inputs.uut.frame_rate_hz, seed=seed,
                            fault_plan=fault_plan) as bench:
                ctx = StepContext(bench=bench, station=inputs.station, uut=inputs.uut, run=run,
                                  clock=clock, requests=requests, emit=emit, log=log,
                                  analyses=inputs.analyses)
                sequencer = Sequencer(
                    inputs.plan, ctx, journal=run.journal, console=console,
                    preflight=lambda: preflight(inputs, bench, run.path, emit, console,
                                                expected_identities),
                    completed=completed)
                outcome = sequencer.execute()
                if manifest is not None:
                    manifest.plan["instruments"] = dict(bench.identities)
                if outcome.state == "complete":
                    verdicts = tuple(verdicts_from_journal(run.journal.completed()))
                    run.register(write_verdicts(run.results_dir, inputs.uut, verdicts))
                    outcome = dataclasses.replace(outcome, verdicts=verdicts)
                return outcome
        except InstrumentError as exc:
            emit("state", source="idle", dest="faulted", cause=str(exc))
            return RunOutcome("faulted", f"could not open the bench: {exc}", 0,
                              len(inputs.plan.steps))


def io_sink(events: EventSink) -> Callable[[dict[str, object]], None]:
    """Adapt the transports' event dicts to the run's event log."""

    def sink(event: dict[str, object]) -> None:
        fields = {("at" if k == "t" else k): v for k, v in event.items() if k != "type"}
        events.emit(str(event.get("type", "io")), **fields)

    return sink


def new_run_folder(inputs: Inputs, runs_root: Path, clock: Clock,
                   wall: Callable[[], float] = time.time) -> RunFolder:
    """A new run folder named by the wall clock's start time (never the simulated clock's: a dry
    run is filed under the moment it was made); `wall` is injectable for tests."""
    utc = dt.datetime.fromtimestamp(wall(), tz=dt.timezone.utc)
    run = RunFolder.create(Path(runs_root).resolve(), uut_serial=inputs.uut.serial,
                           recipe_name=inputs.plan.recipe, utc=utc, clock=clock)
    try:
        run.copy_inputs(station=inputs.station.path, uut=inputs.uut_path,
                        recipe=inputs.recipe_path)
    except BaseException:  # nothing was run: leave no half-made folder behind
        import shutil

        run.release_writer_lock()
        shutil.rmtree(run.path, ignore_errors=True)
        raise
    return run
