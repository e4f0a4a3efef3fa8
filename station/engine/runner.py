"""Run, check and resume: load the inputs, open the bench, execute the plan, write the record.

This is the glue the command line calls. Everything it needs is passed in explicitly.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path


from drivers.clock import Clock, PacedClock, RealClock, SimClock
from drivers.errors import InstrumentError
from sequences.estimate import Estimate, estimate
from sequences.library import find_recipe
from sequences.plan import Plan, expand
from sequences.plansteps import BlackbodyStep, MoveStep
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


def make_clock(station: StationConfig, realtime_speed: float | None) -> Clock:
    """Simulated time for a simulated station unless a real-time demonstration is asked for."""
    if not station.simulated:
        return RealClock()
    if realtime_speed is not None:
        return PacedClock(speed=realtime_speed)
    return SimClock()


def preflight(inputs: Inputs, bench: Bench, run_dir: Path, emit: Emit, console: Console,
              expected_identities: Mapping[str, str] | None = None) -> None:
    """Before anything moves: instruments answer (the same ones, when resuming), setpoints
    within limits, disk is enough."""
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


def new_run_folder(inputs: Inputs, runs_root: Path, clock: Clock) -> RunFolder:
    utc = dt.datetime.fromtimestamp(clock.now(), tz=dt.timezone.utc)
    run = RunFolder.create(Path(runs_root).resolve(), uut_serial=inputs.uut.serial,
                           recipe_name=inputs.plan.recipe, utc=utc, clock=clock)
    run.copy_inputs(station=inputs.station.path, uut=inputs.uut_path, recipe=inputs.recipe_path)
    return run
