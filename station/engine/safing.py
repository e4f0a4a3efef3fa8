"""Leave the bench safe: the source at its safe setpoint, the stage stopped and parked.

Runs on every way out of a run except `complete`. It tries every instrument even if one fails, never
obeys an abort request (it is what an abort leads to), and reports what it could not do.
"""

from __future__ import annotations

from collections.abc import Callable

from drivers.errors import InstrumentError
from station.engine.abort import OperatorRequests
from station.engine.bench import Bench
from station.engine.waiting import StepFailed, wait_until

PARK_TIMEOUT_S = 600.0


def make_safe(bench: Bench, emit: Callable[..., None]) -> list[str]:
    """Safe the bench; returns the problems met (empty when all is safe)."""
    problems: list[str] = []
    never_interrupted = OperatorRequests()
    try:
        bench.blackbody.go_safe()
        emit("safing.blackbody", ok=True)
    except (InstrumentError, OSError) as exc:
        problems.append(f"blackbody not safed: {exc}")
        emit("safing.blackbody", ok=False, error=str(exc))
    try:
        bench.stage.stop()
        bench.stage.park()
        wait_until(bench.clock, never_interrupted, lambda: not bench.stage.is_moving(),
                   timeout_s=PARK_TIMEOUT_S, poll_s=0.25, what="stage park")
        emit("safing.stage", ok=True, positions=bench.stage.positions())
    except (InstrumentError, OSError, StepFailed) as exc:
        problems.append(f"stage not parked: {exc}")
        emit("safing.stage", ok=False, error=str(exc))
    return problems
