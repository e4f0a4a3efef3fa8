"""Duration estimate: each closed form against an independent computation.

* blackbody: the closed form against a numerical integration (scipy.integrate.solve_ivp, the
  reference ODE solver) of dT/dt = clip((T_set - T)/tau, -S, S), with an event at |error| = tol.
* stage: the trapezoidal-profile time against the kinematics of constant acceleration
  (d = a t^2 / 4 for a triangular move; d = v t - v^2/a for a trapezoid; textbook kinematics).
* wheel: shortest way round against a brute-force walk in both directions.
"""

from __future__ import annotations

import math
from dataclasses import replace

import pytest
from scipy.integrate import solve_ivp

from sequences.estimate import (blackbody_settle_s, estimate, slots_between, trapezoid_s,
                                wheel_travel_s)
from sequences.library import find_recipe
from sequences.plan import expand
from sequences.recipe import load_recipe


def settle_by_ode(error: float, tol: float, slew: float, tau: float) -> float:
    def rate(_t, y):
        return [max(-slew, min(slew, -y[0] / tau))]

    def inside(_t, y):
        return abs(y[0]) - tol
    inside.terminal = True
    inside.direction = -1
    sol = solve_ivp(rate, (0.0, 1e6), [error], events=inside, rtol=1e-10, atol=1e-12,
                    max_step=tau / 20)
    return float(sol.t_events[0][0])


@pytest.mark.parametrize("error, tol, slew, tau", [
    (10.0, 0.02, 0.05, 60.0),    # slew-limited, then exponential
    (-25.0, 0.01, 0.2, 30.0),    # cooling
    (1.0, 0.02, 0.05, 60.0),     # never slew-limited (1 K < S*tau = 3 K)
])
def test_blackbody_settle_matches_ode_integration(error, tol, slew, tau) -> None:
    closed = blackbody_settle_s(error, tol, slew, tau)
    numeric = settle_by_ode(error, tol, slew, tau)
    assert closed == pytest.approx(numeric, rel=1e-4)


def test_blackbody_already_within_tolerance_costs_nothing() -> None:
    assert blackbody_settle_s(0.01, 0.02, 0.05, 60.0) == 0.0


@pytest.mark.parametrize("distance, v, a", [(40.0, 10.0, 20.0), (1.0, 10.0, 20.0), (5.0, 10.0, 20.0)])
def test_trapezoid_time_matches_kinematics(distance, v, a) -> None:
    t = trapezoid_s(distance, v, a)
    if distance >= v * v / a:   # reaches full speed: d = v t - v^2 / a
        assert v * t - v * v / a == pytest.approx(distance, rel=1e-12)
    else:                       # triangle: accelerate half the time, decelerate the other half
        assert a * t * t / 4.0 == pytest.approx(distance, rel=1e-12)
    assert trapezoid_s(-distance, v, a) == t


@pytest.mark.parametrize("count", [4, 6, 7])
def test_wheel_goes_the_shortest_way_round(count) -> None:
    for a in range(count):
        for b in range(count):
            forward = next(k for k in range(count) if (a + k) % count == b)
            backward = next(k for k in range(count) if (a - k) % count == b)
            assert slots_between(a, b, count) == min(forward, backward)
    assert wheel_travel_s(0, 5, 6, 1.5) == pytest.approx(1.5)


def test_distortion_grid_total_is_the_sum_of_closed_forms(facts, timing) -> None:
    # the built-in default is 30 K; 10 K keeps the closed form below easy to check by hand
    plan = expand(load_recipe(find_recipe("distortion-grid"), overrides={"difference": 10.0},
                              facts=facts))
    est = estimate(plan, timing)
    oh = timing.command_overhead_s
    wheel = slots_between(0, 2, 6) * 1.5          # open (slot 0) -> pinhole_grid (slot 2)
    # 20 C -> 30 C: slew (10 - 0.05*60)/0.05 = 140 s, then 60 ln(3/0.02) s, then 10 s hold
    blackbody = 140.0 + 60.0 * math.log(3.0 / 0.02) + 10.0
    capture = 16 / 30.0
    expected = [("s1.note", oh), ("s2.target", wheel + oh), ("s3.move", oh),
                ("s4.blackbody", blackbody + oh), ("s5.capture", capture + oh),
                ("s6.analyze", oh)]
    assert [i for i, _ in est.per_step] == [i for i, _ in expected]
    for (_, got), (_, want) in zip(est.per_step, expected):
        assert got == pytest.approx(want, rel=1e-12)
    assert est.total_s == pytest.approx(sum(w for _, w in expected), rel=1e-12)
    assert est.frames == 16
    assert est.bytes == 2 * timing.frame_bytes   # one float32 average of a 16-bit frame
    assert est.warnings == []


def test_state_is_tracked_through_the_plan(facts, timing) -> None:
    text = """\
recipe: state
steps:
  - blackbody: {mode: absolute, value: 30}
  - blackbody: {mode: difference, value: 10}
  - move: {az: 40, el: 0}
  - move: {az: 40, el: 1}
  - capture: {name: s, frames: 10, keep: both}
  - wait: 12.5
"""
    est = estimate(expand(load_recipe("state.yaml", facts=facts, text=text)), timing)
    seconds = dict(est.per_step)
    oh = timing.command_overhead_s
    # second setpoint is reference 20 + 10 = 30 C, where the first left it: only the hold
    assert seconds["s2.blackbody"] == pytest.approx(10.0 + oh)
    assert seconds["s3.move"] == pytest.approx(trapezoid_s(40, 10, 20) + oh)   # az from 0
    assert seconds["s4.move"] == pytest.approx(trapezoid_s(1, 5, 10) + oh)     # only el moves
    assert seconds["s6.wait"] == pytest.approx(12.5 + oh)
    assert est.bytes == 10 * timing.frame_bytes + 2 * timing.frame_bytes


def test_unknown_start_slot_charges_half_a_turn(facts, timing) -> None:
    plan = expand(load_recipe("t.yaml", facts=facts, text="steps:\n  - target: open\n"))
    est = estimate(plan, replace(timing, wheel_start_slot=None))
    assert est.per_step[0][1] == pytest.approx(3 * 1.5 + timing.command_overhead_s)


def test_settle_longer_than_timeout_is_warned(facts, timing) -> None:
    text = "steps:\n  - blackbody: {mode: difference, value: 30, timeout: 100}\n"
    est = estimate(expand(load_recipe("w.yaml", facts=facts, text=text)), timing)
    (warning,) = est.warnings
    assert warning.step_id == "s1.blackbody" and warning.exceeds
    assert warning.where.line == 2 and str(warning).startswith("w.yaml:2:")


def test_missing_model_entries_are_named(facts, timing) -> None:
    plan = expand(load_recipe("t.yaml", facts=facts, text="steps:\n  - target: slanted_edge\n"))
    with pytest.raises(ValueError, match="target 'slanted_edge' has no wheel slot"):
        estimate(plan, replace(timing, wheel_slot_of={"open": 0}))


def test_overnight_soak_is_at_least_eight_hours(facts, timing) -> None:
    # The benchmark recipe must represent a real overnight run (issue requirement: >= 8 h).
    est = estimate(expand(load_recipe(find_recipe("overnight-soak"), facts=facts)), timing)
    assert est.total_s >= 8 * 3600
    assert est.frames == 5 * 64 + 21 * 11 * 8   # five flat fields, then the field scan


def test_settle_within_ten_percent_of_timeout_is_warned(facts, timing) -> None:
    # 20 C -> 21 C difference 1 K: no slew phase (1 K < S tau = 3 K), decay 60 ln(1/0.02) s
    # = 234.7 s, plus the 10 s hold: 244.7 s. A 260 s timeout leaves 6 %: warned, not exceeded.
    needed = 60.0 * math.log(1.0 / 0.02) + 10.0
    text = "steps:\n  - blackbody: {mode: difference, value: 1, timeout: 260}\n"
    est = estimate(expand(load_recipe("n.yaml", facts=facts, text=text)), timing)
    (warning,) = est.warnings
    assert warning.needed_s == pytest.approx(needed, rel=1e-12)
    assert not warning.exceeds and "within 10 %" in str(warning)
    text = "steps:\n  - blackbody: {mode: difference, value: 1, timeout: 300}\n"
    assert estimate(expand(load_recipe("n.yaml", facts=facts, text=text)), timing).warnings == []
