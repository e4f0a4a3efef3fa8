"""Time left from the plan's per-step estimates, corrected by the pace of the run (progress.py).

The reference for every number is the arithmetic of the method written in progress.py's
docstring (damped pace ratio, bound of one step's estimate per step); the plans are invented.
"""

from __future__ import annotations

import random

import pytest

from station.engine.progress import PRIOR_MIN_S, ProgressTracker


def simulate(estimates: list[float], actual: list[float], dt: float = 1.0):
    """Run a plan whose steps take `actual` seconds; sample every `dt`; yield (t, step, progress)."""
    p = ProgressTracker(estimates)
    t = 0.0
    p.begin(t)
    samples = []
    for i, length in enumerate(actual, start=1):
        p.step_started(i, t)
        end = t + length
        while t < end:
            samples.append((t, i, p.snapshot(t)))
            t = min(t + dt, end)
        p.step_finished(i, t)
    p.finish()
    samples.append((t, len(actual), p.snapshot(t)))
    return samples


def test_a_plan_that_runs_as_estimated_counts_down_exactly() -> None:
    estimates = [5.0, 120.0, 30.0, 600.0, 2.0]
    samples = simulate(estimates, estimates)
    total = sum(estimates)
    for t, _, snap in samples[:-1]:
        assert snap.left_s == pytest.approx(total - t, abs=1e-9)  # left + elapsed = plan
        assert snap.fraction == pytest.approx(t / total, abs=1e-9)
    final = samples[-1][2]
    assert final.finished and final.fraction == 1.0 and final.left_s == 0.0
    assert final.elapsed_s == pytest.approx(total)


@pytest.mark.parametrize("slowdown", [0.5, 1.3, 2.0, 3.0])
def test_time_left_never_jumps_by_more_than_the_current_step_estimate(slowdown: float) -> None:
    rng = random.Random(7)
    estimates = [rng.uniform(1.0, 120.0) for _ in range(40)]
    actual = [e * slowdown * rng.uniform(0.8, 1.2) for e in estimates]
    samples = simulate(estimates, actual)
    for (t0, _, a), (t1, step, b) in zip(samples, samples[1:]):
        if b.finished:
            break
        # between two looks the shown value counts down with the clock (or holds while a step
        # overruns), and moves by at most the current step's estimate beyond that
        assert b.left_s >= a.left_s - (t1 - t0) - estimates[step - 1] - 1e-9
        assert b.left_s <= a.left_s + estimates[step - 1] + 1e-9
    assert samples[-1][2].left_s == 0.0 and samples[-1][2].fraction == 1.0


def test_pace_ratio_is_damped_then_follows_the_run() -> None:
    # one 10 s step taking 20 s barely moves the ratio: (20 + 60) / (10 + 60) = 1.1429
    p = ProgressTracker([10.0] + [100.0] * 50)
    p.begin(0.0)
    p.step_started(1, 0.0)
    p.step_finished(1, 20.0)
    assert p.prior_s == pytest.approx(max(PRIOR_MIN_S, 0.05 * 5010.0))
    assert p.ratio == pytest.approx((20 + p.prior_s) / (10 + p.prior_s))
    # forty 100 s steps each taking 120 s: the ratio approaches 1.2
    t = 20.0
    for i in range(2, 42):
        p.step_started(i, t)
        t += 120.0
        p.step_finished(i, t)
    assert p.ratio == pytest.approx((20 + 4800 + p.prior_s) / (10 + 4000 + p.prior_s))
    assert 1.15 < p.ratio < 1.2


def test_a_step_that_overruns_holds_the_time_left_still() -> None:
    p = ProgressTracker([10.0, 10.0, 10.0])
    p.begin(0.0)
    p.step_started(1, 0.0)
    left_at_end_of_estimate = p.snapshot(10.0).left_s
    assert left_at_end_of_estimate == pytest.approx(20.0)
    assert p.snapshot(500.0).left_s == pytest.approx(20.0)  # not dragged towards zero


def test_resumed_run_counts_done_steps_as_done() -> None:
    p = ProgressTracker([100.0, 100.0, 100.0, 100.0], done=[1, 2])
    p.begin(0.0)
    p.step_started(3, 0.0)
    snap = p.snapshot(50.0)
    assert (snap.step, snap.steps) == (3, 4)
    assert snap.fraction == pytest.approx(250.0 / 400.0)
    assert snap.left_s == pytest.approx(150.0)
