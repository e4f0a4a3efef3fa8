"""Wheel travel time: proportional to the slots moved the short way round (the model stated in
simulators/wheel.py), checked against an independent count of steps each way."""

from __future__ import annotations

import pytest

from drivers.clock import SimClock
from simulators.wheel import WheelPhysics


@pytest.mark.parametrize("start,goal", [(1, 2), (1, 4), (1, 6), (2, 5), (6, 1), (3, 3)])
def test_travel_time_short_way_round(start, goal):
    n, sps = 6, 1.5
    forward = (goal - start) % n          # count of steps turning one way
    backward = (start - goal) % n         # and the other
    clock = SimClock()
    wheel = WheelPhysics(clock, n, sps, start)
    assert wheel.move(goal) == pytest.approx(min(forward, backward) * sps)


def test_position_zero_while_travelling_and_home():
    clock = SimClock()
    wheel = WheelPhysics(clock, 6, 1.5, 1)
    wheel.move(3)   # 2 slots: 3.0 s
    clock.sleep(2.9)
    assert wheel.position() == 0 and wheel.is_moving()
    assert "moving" in wheel.check(4)
    clock.sleep(0.2)
    assert wheel.position() == 3
    assert wheel.home() == pytest.approx(2 * 1.5 + 1.5)  # back 2 slots + index search
    clock.sleep(4.5)
    assert wheel.position() == 1
    assert "outside" in wheel.check(7)
