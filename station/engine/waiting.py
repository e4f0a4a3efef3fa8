"""Waiting for the bench: every wait polls through the station clock and honours an abort."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from drivers.clock import Clock
from station.engine.abort import OperatorRequests


class StepFailed(Exception):
    """A step could not do its job (e.g. the blackbody never settled); the run faults safely."""


@dataclass(frozen=True)
class SettleCriterion:
    """Within `tolerance` of `target` continuously for `hold_s`, at most `timeout_s` overall."""

    target: float
    tolerance: float
    hold_s: float
    timeout_s: float

    def within(self, value: float) -> bool:
        return abs(value - self.target) <= self.tolerance


def wait_until(clock: Clock, requests: OperatorRequests, done: Callable[[], bool], *,
               timeout_s: float, poll_s: float, what: str,
               on_poll: Callable[[], None] | None = None) -> None:
    """Poll `done` until it is true; StepFailed after `timeout_s` of clock time.

    `on_poll` runs at every poll (the console uses it to show live readings while waiting).
    """
    start = clock.now()
    while not done():
        requests.check()
        if on_poll is not None:
            on_poll()
        if clock.now() - start >= timeout_s:
            raise StepFailed(f"{what} did not finish within {timeout_s:g} s")
        clock.sleep(poll_s)


def wait_settled(clock: Clock, requests: OperatorRequests, read: Callable[[], float],
                 criterion: SettleCriterion, *, poll_s: float, what: str,
                 on_poll: Callable[[], None] | None = None) -> float:
    """Wait until `read()` stays within tolerance for the hold time; returns the last reading."""
    start = clock.now()
    inside_since: float | None = None
    value = read()
    while True:
        requests.check()
        if on_poll is not None:
            on_poll()
        now = clock.now()
        if criterion.within(value):
            inside_since = now if inside_since is None else inside_since
            if now - inside_since >= criterion.hold_s:
                return value
        else:
            inside_since = None
        if now - start >= criterion.timeout_s:
            raise StepFailed(
                f"{what} did not settle within ±{criterion.tolerance:g} of {criterion.target:g} "
                f"for {criterion.hold_s:g} s in {criterion.timeout_s:g} s (last reading "
                f"{value:.4f}); check the source and its setpoint, or raise the step's timeout")
        clock.sleep(poll_s)
        value = read()
