"""Leave the bench safe: the source at its safe setpoint, the stage stopped and parked.

Runs on every way out of a run except `complete`. It tries every instrument even if one fails, never
obeys an abort request (it is what an abort leads to), and reports what it could not do.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from drivers.errors import InstrumentError
from station.engine.abort import OperatorRequests
from station.engine.bench import Bench
from station.engine.waiting import StepFailed, wait_until

PARK_TIMEOUT_S = 600.0


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
    except (InstrumentError, OSError) as exc:
        problems.append(f"blackbody not safed: {exc}")
        emit("safing.blackbody", ok=False, error=str(exc))
    if on_poll is not None:
        on_poll()
    try:
        bench.stage.stop()
        bench.stage.park()
        wait_until(bench.clock, never_interrupted, lambda: not bench.stage.is_moving(),
                   timeout_s=PARK_TIMEOUT_S, poll_s=0.25, what="stage park", on_poll=on_poll)
        emit("safing.stage", ok=True, positions=bench.stage.positions())
    except (InstrumentError, OSError, StepFailed) as exc:
        problems.append(f"stage not parked: {exc}")
        emit("safing.stage", ok=False, error=str(exc))
    return problems


def _setpoint_or_none(bench: Bench) -> Any:
    """The setpoint the source reports after going safe (for the operator's summary)."""
    try:
        return bench.blackbody.setpoint()
    except (InstrumentError, OSError):
        return None
