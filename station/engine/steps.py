"""One small handler per kind of plan step, dispatched through a registry.

Each handler takes the step and the run context, does its job through the driver interfaces and
returns a small dict that goes into the journal (what resume needs to know the step is done).
A new step kind is a new function here plus its entry in `STEP_HANDLERS` (and its schema in
sequences/steps.py).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

from drivers.clock import Clock
from drivers.interfaces import Frame
from station.engine.abort import OperatorRequests
from station.engine.bench import Bench
from station.inputs.config import StationConfig
from station.engine.waiting import SettleCriterion, StepFailed, wait_settled, wait_until

POLL_S = 1.0
WHEEL_TIMEOUT_S = 120.0
STAGE_TIMEOUT_S = 600.0
STAGE_POSITION_TOLERANCE = 0.01
MAX_BAD_FRAMES = 20


@dataclass
class BlackbodyGuard:
    """The last blackbody criterion: captures are only kept while it holds."""

    mode: str
    criterion: SettleCriterion

    def reading(self, bench: Bench) -> float:
        if self.mode == "difference":
            return bench.blackbody.difference()
        return bench.blackbody.temperature()


@dataclass
class StepContext:
    """What a step handler may use. Built by the sequencer; passed explicitly, never global."""

    bench: Bench
    station: StationConfig
    uut: Any
    run: Any  # station.record.runfolder.RunFolder
    clock: Clock
    requests: OperatorRequests
    emit: Callable[..., None]
    log: Callable[[str, str], None]
    hold: Callable[[str], None] = lambda cause: None      # the sequencer moves to held ...
    release: Callable[[str], None] = lambda cause: None   # ... and back to running
    guard: BlackbodyGuard | None = None
    current_target: str | None = None
    last_counter: int | None = None  # last accepted frame counter, across captures (repeats)
    analyses: Mapping[str, Callable[..., dict]] = field(default_factory=dict)
    poll_s: float = POLL_S
    tick: Callable[[], None] = lambda: None  # live-readings refresh while waiting


def run_blackbody(step: Any, ctx: StepContext) -> dict:
    p = step.params
    bb = ctx.bench.blackbody
    mode = p["mode"]
    value = float(p["value"])
    bb.set_mode(mode)
    if mode == "difference":
        bb.set_difference(value)
    else:
        bb.set_temperature(value)
    criterion = SettleCriterion(value, float(p["tolerance"]), float(p["hold"]),
                                float(p["timeout"]))
    guard = BlackbodyGuard(mode, criterion)
    reading = wait_settled(ctx.clock, ctx.requests, lambda: guard.reading(ctx.bench), criterion,
                           poll_s=ctx.poll_s, what=f"blackbody ({mode} {value:g})",
                           on_poll=ctx.tick)
    ctx.guard = guard
    ctx.emit("blackbody.settled", step=step.id, mode=mode, setpoint=value, reading=reading)
    return {"mode": mode, "setpoint": value, "reading": reading}


def run_target(step: Any, ctx: StepContext) -> dict:
    name = step.params["name"]
    wheel = ctx.bench.wheel
    slot = wheel.select(name)
    wait_until(ctx.clock, ctx.requests, lambda: not wheel.is_moving(),
               timeout_s=WHEEL_TIMEOUT_S, poll_s=ctx.poll_s / 4, what=f"target wheel to {name}",
               on_poll=ctx.tick)
    arrived = wheel.current_slot()
    if arrived != slot:
        raise StepFailed(f"target wheel reports slot {arrived} after moving to slot {slot} "
                         f"({name}); home the wheel and check its slot table")
    ctx.current_target = name
    return {"target": name, "slot": slot}


def run_move(step: Any, ctx: StepContext) -> dict:
    targets = {a: float(v) for a, v in step.params["position"].items()}
    stage = ctx.bench.stage
    stage.move_to(targets)
    wait_until(ctx.clock, ctx.requests, lambda: not stage.is_moving(),
               timeout_s=STAGE_TIMEOUT_S, poll_s=ctx.poll_s / 4, what="stage move",
               on_poll=ctx.tick)
    reached = {a: stage.position(a) for a in targets}
    for axis, want in targets.items():
        if abs(reached[axis] - want) > STAGE_POSITION_TOLERANCE:
            raise StepFailed(f"stage axis {axis} stopped at {reached[axis]:.4f}, asked "
                             f"{want:.4f}; check for a stall or a limit switch")
    return {"positions": reached}


def run_note(step: Any, ctx: StepContext) -> dict:
    ctx.log("info", str(step.params["text"]))
    return {}


def run_wait(step: Any, ctx: StepContext) -> dict:
    seconds = float(step.params["seconds"])
    end = ctx.clock.now() + seconds
    while ctx.clock.now() < end:
        ctx.requests.check()
        ctx.clock.sleep(min(ctx.poll_s, end - ctx.clock.now()))
    return {"seconds": seconds}


def _guard_holds(ctx: StepContext) -> tuple[bool, float | None]:
    if ctx.guard is None:
        return True, None
    value = ctx.guard.reading(ctx.bench)
    return ctx.guard.criterion.within(value), value


def _wait_for_guard(ctx: StepContext, step_id: str, value: float | None) -> None:
    """Hold the run until the blackbody is back within tolerance, or fault after its timeout."""
    assert ctx.guard is not None
    cause = (f"blackbody left its tolerance during {step_id}: reading {value:.4f}, wanted "
             f"{ctx.guard.criterion.target:g} ± {ctx.guard.criterion.tolerance:g}")
    ctx.hold(cause)
    wait_settled(ctx.clock, ctx.requests, lambda: ctx.guard.reading(ctx.bench),  # type: ignore
                 ctx.guard.criterion, poll_s=ctx.poll_s, what="blackbody (guard)",
                 on_poll=ctx.tick)
    ctx.release("blackbody back within tolerance")


def _frame_problem(frame: Frame, shape: tuple[int, int], last: int | None) -> str | None:
    if frame.data.shape != shape:
        return f"short or wrong-shaped frame {frame.data.shape}, expected {shape}"
    if last is not None and frame.counter <= last:
        return f"repeated frame counter {frame.counter} (last {last})"
    return None


def run_capture(step: Any, ctx: StepContext) -> dict:
    """Grab N good frames into the run folder, retaking the whole capture if the guard fails."""
    p = step.params
    count = int(p["frames"])
    attempts = 0
    while True:
        attempts += 1
        ok, value = _guard_holds(ctx)
        if not ok:
            _wait_for_guard(ctx, step.id, value)
            continue
        begin = getattr(ctx.bench.camera, "begin_capture", None)
        if begin is not None:  # noise follows the capture, not a counter a restart resets
            begin(step.id if attempts == 1 else f"{step.id}#retake{attempts}")
        writer = ctx.run.new_capture(
            step.id, p["name"], p.get("keep", "average"), expected_count=count,
            extra={"group": p.get("group"), "target": ctx.current_target,
                   "readings_start": ctx.bench.readings()})
        outcome = _grab_into(step, ctx, writer, count)
        if outcome is None:
            writer.extra["readings_end"] = ctx.bench.readings()
            record = writer.finish()
            ctx.emit("capture.done", step=step.id, name=p["name"], frames=count,
                     attempts=attempts)
            return {"name": p["name"], "frames": count,
                    "capture": record.to_dict(relative_to=ctx.run.path)}
        writer.abandon(outcome[0])
        ctx.emit("capture.discarded", step=step.id, name=p["name"], reason=outcome[0])
        if attempts > 5:
            raise StepFailed(f"capture {p['name']} discarded {attempts} times: {outcome[0]}")
        _wait_for_guard(ctx, step.id, outcome[1])


def _grab_into(step: Any, ctx: StepContext, writer: Any, count: int
               ) -> tuple[str, float | None] | None:
    """Stream frames into `writer`; returns (reason, reading) if the guard failed mid-capture."""
    camera = ctx.bench.camera
    shape = camera.shape
    taken = 0
    bad = 0
    last_counter: int | None = ctx.last_counter
    last_check = ctx.clock.now()
    while taken < count:
        for frame in camera.grab(count - taken):
            ctx.requests.check()
            problem = _frame_problem(frame, shape, last_counter)
            if problem is None and last_counter is not None and frame.counter != last_counter + 1:
                ctx.emit("frame.gap", step=step.id, after=last_counter, got=frame.counter)
            if problem is not None:
                bad += 1
                ctx.emit("frame.rejected", step=step.id, counter=frame.counter, reason=problem)
                if bad > MAX_BAD_FRAMES:
                    raise StepFailed(f"camera: {bad} bad frames in capture {step.id} "
                                     f"(last: {problem}); check the grabber and cable")
                continue
            last_counter = ctx.last_counter = frame.counter
            writer.add(frame)
            taken += 1
            if ctx.guard is not None and ctx.clock.now() - last_check >= ctx.poll_s:
                last_check = ctx.clock.now()
                ok, value = _guard_holds(ctx)
                if not ok:
                    return (f"blackbody out of tolerance ({value:.4f}) after {taken} frames",
                            value)
    ok, value = _guard_holds(ctx)
    if not ok:
        return (f"blackbody out of tolerance ({value:.4f}) at the end of the capture", value)
    return None


def run_analyze(step: Any, ctx: StepContext) -> dict:
    name = step.params["analysis"]
    func = ctx.analyses.get(name)
    if func is None:
        raise StepFailed(f"no analysis named {name!r}; known: {sorted(ctx.analyses)}")
    summary = func(step, ctx)
    ctx.emit("analysis.done", step=step.id, analysis=name, summary=summary)
    return {"analysis": name, "summary": summary}


StepHandler = Callable[[Any, StepContext], dict]

STEP_HANDLERS: Mapping[str, StepHandler] = {
    "blackbody": run_blackbody,
    "target": run_target,
    "move": run_move,
    "capture": run_capture,
    "analyze": run_analyze,
    "note": run_note,
    "wait": run_wait,
}
