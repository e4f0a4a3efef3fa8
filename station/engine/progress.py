"""Time left you can plan a night by: the plan's own estimates, corrected by how the run is going.

How the time left is worked out (all in the run's clock seconds):

1. Pace ratio. After each finished step the ratio of actual to estimated time of the steps done
   so far is damped towards 1 by a prior weight W (seconds of "as planned")::

       r = (actual_done + W) / (estimated_done + W),   W = max(60 s, 5 % of the plan)

   then held to [0.25, 4]. A few short steps that ran long therefore move r little; an hour of
   steps that ran 20 % long moves it to about 1.2.
2. Raw time left = r x (estimates of the steps not yet started)
                 + max(r x estimate of the current step - time already in it, 0).
3. No jumps: when a step starts, the time shown is anchored; while the step runs, the shown value
   stays within ± the current step's estimate of (anchor - time spent in the step, counted up to
   r x its estimate). A plan that is badly wrong is corrected by at most one step's estimate per
   step; in between the time shown counts down smoothly, and holds still while a step overruns.
4. The end: once the last step is done the time left is 0 and the fraction 100 %.

Steps are numbered 1..N on screen. Fraction done = estimated time of the steps done plus the
share of the current step already spent (capped at its estimate), over the plan's total.

Example::

    >>> p = ProgressTracker([10.0, 20.0, 30.0])
    >>> p.begin(0.0); p.step_started(1, 0.0)
    >>> round(p.snapshot(5.0).left_s, 1)
    55.0
    >>> p.step_finished(1, 10.0); p.step_started(2, 10.0); p.snapshot(10.0).step
    2
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

RATIO_LIMITS = (0.25, 4.0)
PRIOR_MIN_S = 60.0
PRIOR_FRACTION = 0.05

__all__ = ["Progress", "ProgressTracker"]


@dataclass(frozen=True)
class Progress:
    """One look at the run: step (1-based, 0 before the first), fraction done, clock seconds."""

    step: int
    steps: int
    fraction: float
    elapsed_s: float
    left_s: float
    ratio: float
    finished: bool


class ProgressTracker:
    """Fraction done and time left of a plan from its per-step estimates (see module docstring).

    `done` gives 1-based indices of steps already done before this session (a resumed run);
    they count as done and carry no pace information.
    """

    def __init__(self, estimates_s: Sequence[float], done: Iterable[int] = ()) -> None:
        self.estimates = [max(float(e), 0.0) for e in estimates_s]
        self.total_s = sum(self.estimates)
        self.prior_s = max(PRIOR_MIN_S, PRIOR_FRACTION * self.total_s)
        self._done: set[int] = {int(i) for i in done if 1 <= int(i) <= len(self.estimates)}
        # estimates of the steps not done, kept as a running sum: O(1) per look, whatever the
        # plan's length (plans reach 200,000 steps)
        self._not_done_s = self.total_s - sum(self.estimates[i - 1] for i in self._done)
        self._actual_done = 0.0
        self._estimated_done = 0.0   # of the steps timed in this session
        self._start: float | None = None
        self._current = 0
        self._current_start = 0.0
        self._anchor_left = 0.0
        self._finished = False

    # -- events ----------------------------------------------------------------------------------
    def begin(self, now: float) -> None:
        self._start = now
        self._anchor_left = self._raw_left(0.0)

    def step_started(self, index: int, now: float) -> None:
        """Step `index` (1-based) starts at clock time `now`."""
        if self._start is None:
            self.begin(now)
        shown = self._left_now(now)
        self._current, self._current_start = int(index), now
        self._anchor_left = shown  # the centre of this step's bound (see _shown_left)

    def step_finished(self, index: int, now: float) -> None:
        """Step `index` finished at `now`: its actual time joins the pace ratio."""
        if index == self._current and index not in self._done:
            self._anchor_left = self._shown_left(now)  # held until the next step starts
            self._actual_done += max(now - self._current_start, 0.0)
            self._estimated_done += self.estimates[index - 1]
        if 1 <= index <= len(self.estimates) and index not in self._done:
            self._not_done_s -= self.estimates[index - 1]
            self._done.add(int(index))

    def finish(self) -> None:
        """The run ended complete: 100 %, nothing left."""
        self._finished = True

    # -- reading ---------------------------------------------------------------------------------
    @property
    def ratio(self) -> float:
        lo, hi = RATIO_LIMITS
        r = (self._actual_done + self.prior_s) / (self._estimated_done + self.prior_s)
        return min(max(r, lo), hi)

    def snapshot(self, now: float) -> Progress:
        elapsed = 0.0 if self._start is None else max(now - self._start, 0.0)
        n = len(self.estimates)
        if self._finished:
            return Progress(n, n, 1.0, elapsed, 0.0, self.ratio, True)
        left = self._left_now(now)
        return Progress(self._current, n, self._fraction(now), elapsed, left, self.ratio, False)

    # -- workings --------------------------------------------------------------------------------
    def _left_now(self, now: float) -> float:
        """The value shown: between a step's end and the next start, the value at that end."""
        if not self._current or self._current in self._done:
            return self._anchor_left
        return self._shown_left(now)

    def _in_step(self, now: float) -> float:
        return max(now - self._current_start, 0.0) if self._current else 0.0

    def _current_estimate(self) -> float:
        return self.estimates[self._current - 1] if self._current else 0.0

    def _raw_left(self, in_step: float) -> float:
        r = self.ratio
        rest = self._not_done_s
        current = 0.0
        if self._current and self._current not in self._done:
            rest -= self._current_estimate()
            current = max(r * self._current_estimate() - in_step, 0.0)
        return r * max(rest, 0.0) + current

    def _bounded(self, raw: float, centre: float) -> float:
        bound = self._current_estimate()
        return max(min(raw, centre + bound), centre - bound, 0.0)

    def _shown_left(self, now: float) -> float:
        in_step = self._in_step(now)
        # the countdown the plan expects within this step stops at the step's expected end, so a
        # step that overruns holds the time left still instead of dragging it towards zero
        expected = min(in_step, self.ratio * self._current_estimate())
        return self._bounded(self._raw_left(in_step), self._anchor_left - expected)

    def _fraction(self, now: float) -> float:
        n = len(self.estimates)
        if self.total_s <= 0:
            return len(self._done) / n if n else 0.0
        done = self.total_s - self._not_done_s
        if self._current and self._current not in self._done:
            est = self._current_estimate()
            done += min(self._in_step(now) / self.ratio, est)
        return min(max(done / self.total_s, 0.0), 1.0)
