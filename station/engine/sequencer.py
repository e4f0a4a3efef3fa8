"""Run a plan step by step, moving the state machine and leaving the bench safe on every way out.

The loop lives here, outside any state-machine callback, so an abort is seen between frames and
polls (transitions holds its lock through callbacks). Completed steps are journalled one by one;
a resumed run skips them and first brings the bench back to the state the next step needs.
"""

from __future__ import annotations

import math
import time
import traceback
from collections.abc import Callable, Mapping
from dataclasses import dataclass

from drivers.errors import InstrumentError, LimitError
from station.engine.abort import RunInterrupted
from station.engine.machine import RunStatus, build_machine
from station.engine.safing import INCOMPLETE_MARK, Shortfall, make_safe, shortfalls
from station.engine.steps import JOURNAL_RESTORERS, STEP_HANDLERS, StepContext, StepHandler
from station.engine.waiting import StepFailed
from analysis.verdicts import Verdict
from sequences.plan import Plan
from sequences.plansteps import PlanStep
from station.engine.ports import Console, JournalWriter

RESTORE_KINDS = ("blackbody", "target", "move")
READINGS_REFRESH_S = 1.0  # real seconds between console readings while a step waits


class PreflightFailed(Exception):
    """Preflight found a reason not to start; nothing has moved."""


@dataclass(frozen=True)
class RunOutcome:
    state: str
    cause: str
    steps_done: int
    steps_total: int
    safing_problems: tuple[str, ...] = ()
    verdicts: tuple[Verdict, ...] = ()  # every verdict of the run (complete runs only)
    safing_incomplete: tuple[Shortfall, ...] = ()  # what safing left for the operator to do

    @property
    def safing_failed(self) -> bool:
        return bool(self.safing_problems)


def describe(step: PlanStep) -> str:
    return step.describe()[:120]


class Sequencer:
    """Execute `plan` against `ctx`; the console and journal are told everything."""

    def __init__(self, plan: Plan, ctx: StepContext, *, journal: JournalWriter,
                 console: Console, preflight: Callable[[], None],
                 completed: Mapping[str, object] | None = None,
                 handlers: Mapping[str, StepHandler] = STEP_HANDLERS) -> None:
        self.plan = plan
        self.ctx = ctx
        self.journal = journal
        self.console = console
        self.preflight = preflight
        self.completed = dict(completed or {})
        self.handlers = handlers
        self.status = RunStatus(on_change=self._on_transition)
        build_machine(self.status)
        ctx.hold = self._hold
        ctx.release = self._release
        ctx.tick = self._refresh_readings
        self._last_refresh = 0.0
        self.steps_done = len(self.completed)
        self.current_step: PlanStep | None = None

    def _on_transition(self, source: str, dest: str, trigger: str, cause: str) -> None:
        self.ctx.emit("state", source=source, dest=dest, trigger=trigger, cause=cause)
        self.console.state(dest, cause)

    def _refresh_readings(self) -> None:
        """Show live readings during long waits; throttled on real time (it is for a person)."""
        now = time.monotonic()
        if now - self._last_refresh >= READINGS_REFRESH_S:
            self._last_refresh = now
            self.console.readings(self.ctx.bench.readings())

    def _hold(self, cause: str) -> None:
        self.status.guard_failed(cause=cause)

    def _release(self, cause: str) -> None:
        self.status.guard_recovered(cause=cause)

    def execute(self) -> RunOutcome:
        self.status.start_preflight(cause="run requested")
        try:
            try:
                self.preflight()
            except (PreflightFailed, InstrumentError) as exc:
                return self._finish_badly("fault", f"preflight: {exc}")
            self.status.preflight_passed(cause="preflight passed")
            self._restore_bench()
            self._run_steps()
        except RunInterrupted as exc:
            return self._finish_badly("abort", str(exc) or "operator abort")
        except (StepFailed, InstrumentError, LimitError) as exc:
            return self._finish_badly("fault", str(exc))
        except OSError as exc:
            return self._finish_badly("fault", f"file system: {exc}; check the disk and the run "
                                      "folder, then 'nightbench resume' the run")
        except Exception as exc:  # an internal error still leaves the bench safe
            self.ctx.emit("internal_error", error=repr(exc), traceback=traceback.format_exc())
            return self._finish_badly("fault", f"internal error {exc!r} (traceback in "
                                      "events.jsonl); please report it")
        self.status.plan_finished(cause="all steps done")
        return RunOutcome("complete", "all steps done", self.steps_done, len(self.plan.steps))

    def _run_steps(self) -> None:
        total = len(self.plan.steps)
        for index, step in enumerate(self.plan.steps):
            if step.id in self.completed:
                continue
            self._pause_point()
            self.ctx.requests.check()
            self.current_step = step
            self.console.step(index + 1, step.id, describe(step))
            self.ctx.emit("step.start", step=step.id, kind=step.kind, index=index, total=total)
            result = self.handlers[step.kind](step, self.ctx)
            self.journal.record(step.id, step.kind, result)
            self.steps_done += 1
            self.ctx.emit("step.done", step=step.id, kind=step.kind, result=result)
            self._refresh_readings()  # for a person: at most once a real second
        self.current_step = None

    def _restore_bench(self) -> None:
        """On resume, redo the last blackbody, target and move steps before the first open step."""
        if not self.completed:
            return
        first_open = next((i for i, s in enumerate(self.plan.steps)
                           if s.id not in self.completed), len(self.plan.steps))
        latest: dict[str, PlanStep] = {}
        for step in self.plan.steps[:first_open]:
            restorer = JOURNAL_RESTORERS.get(step.kind)
            if restorer is not None and step.id in self.completed:
                restorer(self.completed[step.id], self.ctx)
            if step.kind in RESTORE_KINDS:
                latest[step.kind] = step
        for kind in RESTORE_KINDS:
            if kind in latest:
                step = latest[kind]
                self.ctx.emit("resume.restore", step=step.id, kind=kind)
                self.console.log("info", f"resume: restoring bench state from {step.id}")
                self.handlers[kind](step, self.ctx)

    @staticmethod
    def plan_source(step: PlanStep) -> str:
        return f"recipe line {step.source.line}"

    def _pause_point(self) -> None:
        if not self.ctx.requests.pause_requested:
            return
        self.status.operator_pause(cause="operator pause")
        while self.ctx.requests.pause_requested:
            self.ctx.requests.check()
            self.ctx.tick()
            self.ctx.requests.wait_for_operator(self.ctx.poll_s)
        self.ctx.requests.check()
        self.status.operator_resume(cause="operator resume")

    def _finish_badly(self, kind: str, cause: str) -> RunOutcome:
        step = self.current_step
        if step is not None:  # say which step, so the operator knows where it stopped
            cause = f"step {step.id} ({step.kind}, {self.plan_source(step)}): {cause}"
        if kind == "abort":
            self.status.request_abort(cause=cause)
        else:
            self.status.request_fault(cause=cause)
        self.console.log("warning", f"safing the bench: {cause}")
        problems = make_safe(self.ctx.bench, self.ctx.emit,
                             on_poll=self.ctx.requests.deliver_notices)
        for p in problems:
            self.console.log("error", p)
        left = shortfalls(problems, self._safe_c())
        if left:  # on disk at once: the one record that the bench was left live
            self.ctx.emit("safing.incomplete", instruments=[s.instrument for s in left],
                          shortfalls=[s.as_dict() for s in left])
            for shortfall in left:
                self.console.log("error", f"{INCOMPLETE_MARK}: {shortfall.instrument}: "
                                 f"{shortfall.by_hand}")
        full_cause = (cause if not problems
                      else f"{cause}; {INCOMPLETE_MARK}: " + "; ".join(problems))
        if kind == "abort":
            self.status.safe_after_abort(cause=full_cause)
        else:
            self.status.safe_after_fault(cause=full_cause)
        return RunOutcome(self.status.state, full_cause, self.steps_done, len(self.plan.steps),
                          tuple(problems), safing_incomplete=tuple(left))

    def _safe_c(self) -> float | None:
        """The blackbody's safe setpoint (for the operator's manual steps), if known."""
        value = getattr(self.ctx.bench.blackbody, "safe_c", None)
        if value is None:
            entry = getattr(self.ctx.station, "instruments", {}).get("blackbody")
            value = getattr(entry, "settings", {}).get("safe_c") if entry is not None else None
        try:
            number = float(value) if value is not None else math.nan
        except (TypeError, ValueError):
            return None
        return number if math.isfinite(number) else None
