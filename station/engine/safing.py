"""Leave the bench safe: the source at its safe setpoint, the stage stopped and parked.

Runs on every way out of a run except `complete`. It tries every instrument even if one fails
(whatever a driver raises, including a limit refusal of the safe setpoint), never obeys an abort
request (it is what an abort leads to), and reports what it could not do; `shortfalls` turns
those reports into the manual steps the console, the exit code and the notification carry.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from drivers.errors import InstrumentError
from station.engine.abort import OperatorRequests
from station.engine.bench import Bench
from station.engine.waiting import StepFailed, wait_until

PARK_TIMEOUT_S = 600.0
BLACKBODY_NOT_SAFED = "blackbody not safed"
STAGE_NOT_PARKED = "stage not parked"
INCOMPLETE_MARK = "SAFING INCOMPLETE"  # in a run's cause whenever safing left something live


def make_safe(bench: Bench, emit: Callable[..., None],
              on_poll: Callable[[], None] | None = None) -> list[str]:
    """Safe the bench; returns the problems met (empty when all is safe).

    `on_poll` runs between the actions and while the stage parks (the sequencer passes the
    delivery of operator notices, so a second Ctrl-C is reported while safing goes on).
    """
    problems: list[str] = []
    never_interrupted = OperatorRequests()
    try:
        bench.blackbody.go_safe()
        emit("safing.blackbody", ok=True, setpoint_c=_setpoint_or_none(bench))
    except Exception as exc:  # whatever a driver raises, the stage must still be parked
        problems.append(f"{BLACKBODY_NOT_SAFED}: {_reason(exc)}")
        emit("safing.blackbody", ok=False, error=_reason(exc))
    if on_poll is not None:
        on_poll()
    try:
        bench.stage.stop()
        bench.stage.park()
        wait_until(bench.clock, never_interrupted, lambda: not bench.stage.is_moving(),
                   timeout_s=PARK_TIMEOUT_S, poll_s=0.25, what="stage park", on_poll=on_poll)
        emit("safing.stage", ok=True, positions=bench.stage.positions())
    except Exception as exc:  # reported, never raised: safing is the last way out
        problems.append(f"{STAGE_NOT_PARKED}: {_reason(exc)}")
        emit("safing.stage", ok=False, error=_reason(exc))
    return problems


def _reason(exc: Exception) -> str:
    """The error as the operator reads it; an unexpected kind of error names its type."""
    if isinstance(exc, (InstrumentError, OSError, StepFailed)):
        return str(exc)
    return f"{type(exc).__name__}: {exc}"


def _setpoint_or_none(bench: Bench) -> Any:
    """The setpoint the source reports after going safe (for the operator's summary)."""
    try:
        return bench.blackbody.setpoint()
    except (InstrumentError, OSError):
        return None


@dataclass(frozen=True)
class Shortfall:
    """One instrument safing could not make safe, and what the operator must do by hand.

    Why spelled out: a failed safing is the one outcome where software can no longer protect
    the bench; whoever reads the console, the exit code or the notification must know which
    instrument is still live and how to make it safe without the program."""

    instrument: str
    problem: str
    by_hand: str

    def as_dict(self) -> dict[str, str]:
        return {"instrument": self.instrument, "problem": self.problem, "by_hand": self.by_hand}


def shortfalls(problems: Sequence[str], safe_c: float | None) -> list[Shortfall]:
    """The problems `make_safe` returned, each with the manual steps for its instrument."""
    safe = f"{safe_c:g} C" if safe_c is not None else "its safe setpoint"
    found = []
    for problem in problems:
        if problem.startswith(BLACKBODY_NOT_SAFED):
            found.append(Shortfall(
                "blackbody", problem,
                f"switch the blackbody controller to its standby, or set it to {safe} at the "
                "front panel; the source may be hot: do not touch the emitter"))
        elif problem.startswith(STAGE_NOT_PARKED):
            found.append(Shortfall(
                "stage", problem,
                "stop the stage and park it at its controller (home a tripped axis after "
                "checking it); keep clear of the travel until it stands still"))
        else:
            found.append(Shortfall("bench", problem, "check the bench by hand before leaving it"))
    return found
