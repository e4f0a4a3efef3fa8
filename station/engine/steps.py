"""One small handler per kind of plan step, dispatched through a registry.

Each handler takes its typed step (sequences.plansteps) and the run context, does its job through
the driver interfaces and returns a small dict that goes into the journal (what resume needs to
know the step is done). A new step kind is a new function here plus its entry in
`STEP_HANDLERS` (see DEVELOPERS.md for the other places).
"""

from __future__ import annotations

import datetime as _dt
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

from analysis.uut import UutSpec
from analysis.verdicts import Verdict
from drivers.clock import Clock
from drivers.errors import LimitError
from drivers.interfaces import Frame
from sequences.plansteps import (AlignStep, AnalyzeStep, BlackbodyStep, CaptureStep,
                                 FovScanStep, MoveStep, NoteStep, PlanStep, TargetStep, WaitStep)
from station.analyses.registry import AnalysisContext, AnalysisFailed, Registry
from station.analyses.site import FolderSite
from station.engine.abort import OperatorRequests
from station.engine.align import restore_align_origin, run_align, run_fov_scan
from station.engine.bench import Bench
from station.engine.ports import Emit
from station.inputs.config import StationConfig
from station.engine.waiting import SettleCriterion, StepFailed, wait_settled, wait_until
from station.record.frame_store import CaptureWriter
from station.record.runfolder import RunFolder

JournalData = dict[str, object]

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
    uut: UutSpec
    run: RunFolder
    clock: Clock
    requests: OperatorRequests
    emit: Emit
    log: Callable[[str, str], None]
    hold: Callable[[str], None] = lambda cause: None      # the sequencer moves to held ...
    release: Callable[[str], None] = lambda cause: None   # ... and back to running
    guard: BlackbodyGuard | None = None
    current_target: str | None = None
    last_counter: int | None = None  # last accepted frame counter, across captures (repeats)
    analyses: Registry = field(default_factory=lambda: Registry([]))
    poll_s: float = POLL_S
    tick: Callable[[], None] = lambda: None  # live-readings refresh while waiting
    verdicts: list[Verdict] = field(default_factory=list)  # judged by this session's analyses
    origin: dict[str, float] = field(default_factory=dict)  # stage origin set by align (per axis)
    memo: dict[tuple[Any, ...], Any] = field(default_factory=dict)  # analyses' shared results


def _refuse(refusal: object | None) -> None:
    """Raise LimitError for a refused setpoint or position: nothing has been sent."""
    if refusal is not None:
        message = getattr(refusal, "message", str(refusal))
        hint = getattr(refusal, "hint", "")
        raise LimitError(f"{message}; nothing was sent" + (f" ({hint})" if hint else ""))


def run_blackbody(step: BlackbodyStep, ctx: StepContext) -> JournalData:
    _refuse(ctx.station.limits.setpoint_problem(step.mode, step.setpoint))
    bb = ctx.bench.blackbody
    bb.set_mode(step.mode)
    if step.mode == "difference":
        bb.set_difference(step.setpoint)
    else:
        bb.set_temperature(step.setpoint)
    criterion = SettleCriterion(step.setpoint, step.tolerance_k, step.hold_s, step.timeout_s)
    guard = BlackbodyGuard(step.mode, criterion)
    reading = wait_settled(ctx.clock, ctx.requests, lambda: guard.reading(ctx.bench), criterion,
                           poll_s=ctx.poll_s, what=f"blackbody ({step.mode} {step.setpoint:g})",
                           on_poll=ctx.tick)
    ctx.guard = guard
    ctx.emit("blackbody.settled", step=step.id, mode=step.mode, setpoint=step.setpoint,
             reading=reading)
    return {"mode": step.mode, "setpoint": step.setpoint, "reading": reading}


def run_target(step: TargetStep, ctx: StepContext) -> JournalData:
    name = step.target
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


def run_move(step: MoveStep, ctx: StepContext) -> JournalData:
    # Positions are relative to the stage origin an align step set (none: absolute). A light
    # context without the field (tests, tools) moves in absolute positions.
    origin: Mapping[str, float] = getattr(ctx, "origin", None) or {}
    targets = {a: float(v) + origin.get(a, 0.0) for a, v in step.position.items()}
    for axis, value in targets.items():
        _refuse(ctx.station.limits.position_problem(axis, value))
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
    if origin:
        return {"positions": reached, "origin": dict(origin)}
    return {"positions": reached}


def run_note(step: NoteStep, ctx: StepContext) -> JournalData:
    ctx.log("info", step.text)
    return {}


def run_wait(step: WaitStep, ctx: StepContext) -> JournalData:
    seconds = step.duration_s
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


def run_capture(step: CaptureStep, ctx: StepContext) -> JournalData:
    """Grab N good frames into the run folder, retaking the whole capture if the guard fails."""
    count = step.frames
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
            step.id, step.name, step.keep, expected_count=count,
            extra={"group": step.group, "target": ctx.current_target,
                   "readings_start": ctx.bench.readings()})
        outcome = _grab_into(step, ctx, writer, count)
        if outcome is None:
            writer.extra["readings_end"] = ctx.bench.readings()
            record = writer.finish()
            ctx.emit("capture.done", step=step.id, name=step.name, frames=count,
                     attempts=attempts)
            return {"name": step.name, "frames": count,
                    "capture": record.to_dict(relative_to=ctx.run.path)}
        writer.abandon(outcome[0])
        ctx.emit("capture.discarded", step=step.id, name=step.name, reason=outcome[0])
        if attempts > 5:
            raise StepFailed(f"capture {step.name} discarded {attempts} times: {outcome[0]}")
        _wait_for_guard(ctx, step.id, outcome[1])


def _grab_into(step: CaptureStep, ctx: StepContext, writer: CaptureWriter, count: int
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


def run_analyze(step: AnalyzeStep, ctx: StepContext) -> JournalData:
    """Run a registered analysis over the run folder; its verdicts go to the journal too, so a
    resumed run still reports them."""
    analysis = ctx.analyses.get(step.analysis)
    if analysis is None:
        raise StepFailed(f"no analysis named {step.analysis!r}; known: {sorted(ctx.analyses)}")
    site = FolderSite(ctx.run.path, ctx.run.results_dir, ctx.run.plots_dir,
                      run_id=ctx.run.path.name, register=ctx.run.register, memo=ctx.memo)
    date = _dt.datetime.fromtimestamp(ctx.clock.now(), tz=_dt.timezone.utc).strftime("%Y-%m-%d")
    try:
        outcome = analysis.run(site, step, AnalysisContext(ctx.station, ctx.uut, date))
    except AnalysisFailed as exc:
        raise StepFailed(f"analysis {step.analysis}: {exc}") from None
    ctx.verdicts.extend(outcome.verdicts)
    summary = dict(outcome.summary)
    verdicts = [v.to_dict() for v in outcome.verdicts]
    ctx.emit("analysis.done", step=step.id, analysis=step.analysis, summary=summary,
             verdicts=verdicts)
    return {"analysis": step.analysis, "summary": summary, "verdicts": verdicts}


StepHandler = Callable[[PlanStep, StepContext], JournalData]

STEP_HANDLERS: Mapping[str, Callable[..., JournalData]] = {
    BlackbodyStep.kind: run_blackbody,
    TargetStep.kind: run_target,
    MoveStep.kind: run_move,
    CaptureStep.kind: run_capture,
    AnalyzeStep.kind: run_analyze,
    NoteStep.kind: run_note,
    WaitStep.kind: run_wait,
    AlignStep.kind: run_align,
    FovScanStep.kind: run_fov_scan,
}

JOURNAL_RESTORERS: Mapping[str, Callable[[Mapping[str, object], StepContext], None]] = {
    AlignStep.kind: restore_align_origin,
}
"""On resume, what a completed step left in the run context, rebuilt from its journal record
(the aligned pose as the stage origin)."""
