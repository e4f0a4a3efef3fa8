"""Stage kinematics: move duration against the rest-to-rest trapezoidal profile (textbook
kinematics: t = d/v + v/a when d > v^2/a, else 2 sqrt(d/a)), and the sampled profile never
exceeding v or a."""

from __future__ import annotations

import math

import numpy as np
import pytest

from drivers.clock import SimClock
from simulators.stage import StagePhysics, distance_at, move_duration

AXES = {"az": {"min": -45, "max": 45, "hard_min": -50, "hard_max": 50, "velocity": 10.0,
               "acceleration": 20.0, "start": 0.0}}


@pytest.mark.parametrize("d", [0.1, 2.0, 5.0, 5.0001, 30.0, 90.0])
def test_duration_is_trapezoid_or_triangle(d):
    v, a = 10.0, 20.0
    expected = d / v + v / a if d > v * v / a else 2.0 * math.sqrt(d / a)
    assert move_duration(d, v, a) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("d", [2.0, 30.0])
def test_sampled_profile_respects_speed_and_acceleration(d):
    v, a = 10.0, 20.0
    dt = 1e-3
    t = np.arange(0.0, move_duration(d, v, a) + 0.1, dt)
    x = np.array([distance_at(ti, d, v, a) for ti in t])
    speed = np.diff(x) / dt
    accel = np.diff(speed) / dt
    assert speed.max() <= v * (1 + 1e-9)
    assert np.abs(accel).max() <= a * (1 + 1e-3)   # finite-difference error at the corners
    assert x[-1] == pytest.approx(d)


def test_axis_reports_moving_and_live_position_then_arrives():
    clock = SimClock()
    st = StagePhysics(clock, AXES)
    duration = st.move("az", -30.0)
    assert duration == pytest.approx(3.5)
    clock.sleep(1.75)  # half-way in time = half-way in distance (symmetric profile)
    assert st.state("az") == "MOVING" and st.position("az") == pytest.approx(-15.0)
    clock.sleep(1.75)
    assert st.state("az") == "READY" and st.position("az") == pytest.approx(-30.0)


def test_soft_limit_refused_and_hard_limit_stops_with_error():
    clock = SimClock()
    st = StagePhysics(clock, AXES)
    assert "soft limits" in st.check("az", 46.0)
    st.move("az", 40.0, runaway=True)   # injected fault: the axis runs on past its target
    clock.sleep(10.0)
    assert st.position("az") == pytest.approx(50.0) and st.state("az") == "HARDLIMIT"
    assert "HOME" in st.check("az", 0.0)
    st.home("az")
    clock.sleep(10.0)
    assert st.state("az") == "READY" and st.position("az") == pytest.approx(0.0)


def test_stop_freezes_axis_where_it_is():
    clock = SimClock()
    st = StagePhysics(clock, AXES)
    st.move("az", 30.0)
    clock.sleep(0.25)  # accelerating: x = a t^2 / 2 = 0.625
    st.stop()
    clock.sleep(5.0)
    assert st.position("az") == pytest.approx(0.625) and st.state("az") == "READY"
