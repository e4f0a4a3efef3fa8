"""Run, check and resume: load the inputs, open the bench, execute the plan, write the record.

This is the glue the command line calls. Everything it needs is passed in explicitly.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from drivers.clock import Clock, PacedClock, RealClock, SimClock
from drivers.errors import InstrumentError
from sequences.estimate import Estimate, estimate
from sequences.library import find_recipe
from sequences.plan import Plan, expand
from sequences.recipe import load_recipe
from station.engine.abort import OperatorRequests, abort_on_signals
from station.analyses.builtin import ANALYSES
from station.record.atomic import check_free_space
from station.engine.bench import Bench, open_bench
from station.formatting import format_duration
from station.inputs.config import BUILTIN_DIR, StationConfig, load_station
from station.engine.sequencer import PreflightFailed, RunOutcome, Sequencer
from station.engine.steps import StepContext
from station.engine.timing import timing_model
from station.engine.prechecks import check_frame_format
from station.inputs.uut_file import load_uut

DEMO_UUT = BUILTIN_DIR / "demo_uut.yaml"
DISK_MARGIN_BYTES = 200 * 1024 * 1024


@dataclass
class Inputs:
    """Validated inputs of one run: nothing has been opened or moved yet."""

    station: StationConfig
    uut: Any
    uut_path: Path
    recipe_path: Path
    recipe: Any
    plan: Plan
    estimate: Estimate
    overrides: Mapping[str, Any] = field(default_factory=dict)


def load_inputs(recipe: str | Path, *, station_path: Path | None, uut_path: Path | None,
                overrides: Mapping[str, Any]) -> Inputs:
    """Load and validate station, UUT and recipe; raises SourceError (all problems) if bad."""
    station = load_station(station_path)
    uut_file = Path(uut_path) if uut_path is not None else DEMO_UUT
    uut = load_uut(uut_file)
    recipe_path = find_recipe(recipe)
    parsed = load_recipe(recipe_path, overrides=dict(overrides),
                         facts=station.facts(frozenset(ANALYSES)))
    plan = expand(parsed)
    timing = timing_model(station, frame_rate_hz=uut.frame_rate_hz,
                          frame_shape=(uut.height, uut.width))
    return Inputs(station, uut, uut_file, recipe_path, parsed, plan, estimate(plan, timing),
                  dict(overrides))


def make_clock(station: StationConfig, realtime_speed: float | None) -> Clock:
    """Simulated time for a simulated station unless a real-time demonstration is asked for."""
    if not station.simulated:
        return RealClock()
    from station.engine.served import is_served, served_clock

    if is_served(station):  # the served bench keeps the time (it may pace it itself)
        return served_clock(station)
    if realtime_speed is not None:
        return PacedClock(speed=realtime_speed)
    return SimClock()


def preflight(inputs: Inputs, bench: Bench, run_dir: Path, emit: Any, console: Any,
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
    try:  # the analysis reads frames with the UUT file's geometry: they must agree
        check_frame_format(bench.camera.shape, inputs.uut, "the camera")
    except ValueError as exc:
        raise PreflightFailed(str(exc)) from None
    limits = inputs.station.blackbody_limits
    for step in inputs.plan.steps:
        if step.kind == "blackbody":
            lo, hi = ((limits.min_c, limits.max_c) if step.params["mode"] == "absolute"
                      else (limits.min_difference_k, limits.max_difference_k))
            if not lo <= float(step.params["value"]) <= hi:
                raise PreflightFailed(f"{step.id}: blackbody setpoint {step.params['value']} "
                                      f"outside the station limits [{lo}, {hi}]")
        if step.kind == "move":
            for axis, value in step.params["position"].items():
                if axis not in inputs.station.axes or not inputs.station.axes[axis].contains(
                        float(value)):
                    raise PreflightFailed(f"{step.id}: stage {axis}={value} outside the soft "
                                          "limits")
    try:
        check_free_space(run_dir, int(inputs.estimate.bytes), DISK_MARGIN_BYTES)
    except OSError as exc:
        raise PreflightFailed(str(exc)) from exc
    emit("preflight.passed", estimate_s=inputs.estimate.total_s, bytes=int(inputs.estimate.bytes),
         frames=inputs.estimate.frames)
    console.log("info", f"preflight passed: {len(inputs.plan.steps)} steps, "
                f"{inputs.estimate.frames} frames, estimated {format_duration(inputs.estimate.total_s)}")


def plan_summary(inputs: Inputs, seed: int) -> dict[str, Any]:
    """What the manifest records about the plan (resume reads it back)."""
    return {"recipe": inputs.plan.recipe, "station": inputs.station.name,
            "uut_serial": inputs.uut.serial, "overrides": dict(inputs.overrides), "seed": seed,
            "steps": len(inputs.plan.steps), "frames": inputs.estimate.frames,
            "estimate_s": inputs.estimate.total_s, "simulated": inputs.station.simulated}


def execute(inputs: Inputs, run: Any, clock: Clock, console: Any, *, seed: int,
            completed: Mapping[str, Any] | None = None, fault_plan: Any = None,
            manifest: Any = None,
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
                                  analyses=ANALYSES)
                sequencer = Sequencer(
                    inputs.plan, ctx, journal=run.journal, console=console,
                    preflight=lambda: preflight(inputs, bench, run.path, emit, console,
                                                expected_identities),
                    completed=completed)
                outcome = sequencer.execute()
                if manifest is not None:
                    manifest.plan["instruments"] = dict(bench.identities)
                return outcome
        except InstrumentError as exc:
            emit("state", source="idle", dest="faulted", cause=str(exc))
            return RunOutcome("faulted", f"could not open the bench: {exc}", 0,
                              len(inputs.plan.steps))


def io_sink(events: Any) -> Any:
    """Adapt the transports' event dicts to the run's event log."""

    def sink(event: dict[str, Any]) -> None:
        fields = {("at" if k == "t" else k): v for k, v in event.items() if k != "type"}
        events.emit(str(event.get("type", "io")), **fields)

    return sink


def new_run_folder(inputs: Inputs, runs_root: Path, clock: Clock) -> Any:
    from station.record.runfolder import RunFolder

    utc = dt.datetime.fromtimestamp(clock.now(), tz=dt.timezone.utc)
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
