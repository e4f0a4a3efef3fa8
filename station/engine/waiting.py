"""Waiting for the bench: every wait polls through the station clock and honours an abort.

A settle wait on a real clock polls every `poll_s`, always. On a simulated clock it may skip
polls while the reading is far from the band: the next poll comes after as many whole `poll_s`
as the reading, moving at twice its last observed rate, would need to come within `NEAR_BANDS`
tolerances of the target (at most `MAX_SKIP` polls). Near the band, and whenever the rate is
unknown or the reading moves away, it polls every `poll_s` again. The polls stay on the same
grid of times (start + n * poll_s), and the simulated physics is a function of time alone, so
the readings near the band, the moment the band is entered and the hold are exactly those of
the every-second wait: only readings far outside the band, which cannot settle anything, are
not asked for.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
import math

from drivers.clock import Clock
from station.engine.abort import OperatorRequests


class StepFailed(Exception):
    """A step could not do its job (e.g. the blackbody never settled); the run faults safely."""


NEAR_BANDS = 3.0   # within this many tolerances of the target: poll every poll_s
MAX_SKIP = 30      # at most this many poll_s between two polls of a simulated settle wait
RATE_MARGIN = 2.0  # assume the reading may move this many times faster than it just did


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
    previous: tuple[float, float] | None = None  # (time, value) of the poll before
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
        polls = 1
        if clock.simulated and previous is not None:
            polls = polls_to_skip(criterion, value, previous[1], (now - previous[0]) / poll_s)
            polls = max(1, min(polls, math.ceil((criterion.timeout_s - (now - start)) / poll_s)))
        previous = (now, value)
        clock.sleep(poll_s * polls)
        value = read()


def polls_to_skip(criterion: SettleCriterion, value: float, before: float,
                  polls_between: float) -> int:
    """How many `poll_s` until the next poll of a simulated settle wait (1 = every poll).

    `before` was read `polls_between` polls earlier. The reading may keep closing in at up to
    RATE_MARGIN times its last rate; the next poll comes while it is still at least
    NEAR_BANDS tolerances away, so every poll near the band is made.

    >>> c = SettleCriterion(target=10.0, tolerance=0.02, hold_s=600, timeout_s=7200)
    >>> polls_to_skip(c, 5.0, 4.9, 1)      # 0.1 per poll, 4.94 to go: 24 polls
    24
    >>> polls_to_skip(c, 9.95, 9.94, 1)    # near the band: every poll
    1
    >>> polls_to_skip(c, 5.0, 5.1, 1)      # moving away: every poll
    1
    """
    if polls_between <= 0:
        return 1
    distance = abs(value - criterion.target) - NEAR_BANDS * criterion.tolerance
    closing = (abs(before - criterion.target) - abs(value - criterion.target)) / polls_between
    if distance <= 0 or closing <= 0:
        return 1
    return max(1, min(MAX_SKIP, int(distance / (RATE_MARGIN * closing))))
