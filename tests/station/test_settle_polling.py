"""A simulated settle wait skips far-off polls and still settles at the same moment.

Reference: the every-second wait itself (what a real bench does at real-time pacing), run on the
same simulated blackbody (simulators/blackbody.py: first-order lag with slew limit, readback
noise a deterministic function of time), and the lag's closed form for the settling time
(t = tau * ln(e0 / tolerance) once in the linear region: textbook first-order system response).
"""

from __future__ import annotations

import math

import pytest

from drivers.clock import SimClock
from simulators.blackbody import BlackbodyPhysics
from station.engine.abort import OperatorRequests
from station.engine.waiting import SettleCriterion, StepFailed, wait_settled


class EveryPollClock(SimClock):
    """Simulated time that the wait treats as real: it must poll every poll_s."""

    simulated = False


def _settle(clock: SimClock, setpoint: float, tolerance: float = 0.02, hold: float = 120.0,
            timeout: float = 7200.0) -> tuple[float, float, int]:
    bb = BlackbodyPhysics(clock, start_c=22.0, reference_c=22.0, seed=4)
    bb.set("difference", setpoint)
    reads = []

    def read() -> float:
        reads.append(clock.now())
        return bb.measured_c() - bb.measured_reference_c()

    start = clock.now()
    value = wait_settled(clock, OperatorRequests(), read,
                         SettleCriterion(setpoint, tolerance, hold, timeout), poll_s=1.0,
                         what="blackbody")
    return clock.now() - start, value, len(reads)


@pytest.mark.parametrize("setpoint", [1.0, 5.0, 15.0, 30.0])
def test_skipping_far_polls_settles_at_the_same_second_with_the_same_reading(setpoint: float
                                                                             ) -> None:
    every_t, every_value, every_reads = _settle(EveryPollClock(), setpoint)
    sim_t, sim_value, sim_reads = _settle(SimClock(), setpoint)
    assert sim_t == every_t and sim_value == every_value  # same grid, same physics: exact
    assert sim_reads < every_reads
    # Closed form (textbook first-order system: e(t) = e0 exp(-t / tau) in the linear region,
    # entered at e = r tau = 6 K after slewing at r = 0.1 K/s), plus the hold. The readback
    # noise (2 mK, 1 sigma) can restart the hold while e is within 3 sigma of the band edge:
    # up to tau ln((tol + 3 sigma) / (tol - 3 sigma)) = 37 s later.
    e0 = min(setpoint, 0.1 * 60.0)
    expected = max(0.0, setpoint - e0) / 0.1 + 60.0 * math.log(e0 / 0.02) + 120.0
    noise_s = 60.0 * math.log((0.02 + 0.006) / (0.02 - 0.006))
    assert expected - 5.0 <= every_t <= expected + noise_s + 5.0

def test_a_source_that_never_comes_times_out_at_the_same_moment() -> None:
    clocks = (EveryPollClock(), SimClock())
    for clock in clocks:
        with pytest.raises(StepFailed, match="did not settle"):
            _settle(clock, 30.0, timeout=200.0)  # the ramp alone takes 240 s
    assert clocks[0].now() == clocks[1].now()
