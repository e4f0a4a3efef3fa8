"""Blackbody physics against an independent reference: scipy's ODE solver integrating
dT/dt = clamp((S(t) - T)/tau, -r, r) (the model stated in simulators/blackbody.py), and the hand
closed form of the step response."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from drivers.clock import SimClock
from simulators.blackbody import BlackbodyPhysics

TAU, SLEW = 60.0, 0.1


def _bb(clock, **kw):
    args = dict(start_c=22.0, reference_c=22.0, time_constant_s=TAU, slew_k_per_s=SLEW,
                noise_mk=0.0, reference_drift_k_per_h=0.0, seed=1)
    args.update(kw)
    return BlackbodyPhysics(clock, **args)


def _reference(setpoint, t_end, t0=22.0):
    """scipy solve_ivp (RK45, rtol 1e-10) of the slew-limited first-order lag."""
    def f(t, y):
        return [max(-SLEW, min(SLEW, (setpoint(t) - y[0]) / TAU))]
    return solve_ivp(f, (0.0, t_end), [t0], rtol=1e-10, atol=1e-10, dense_output=True,
                     max_step=1.0)


@pytest.mark.parametrize("target", [35.0, 22.5, 5.0, 80.0])
def test_step_response_matches_ode_reference(target):
    clock = SimClock()
    bb = _bb(clock)
    bb.set("absolute", target)
    t0 = clock.now()
    ref = _reference(lambda t: target, 900.0)
    for t in np.linspace(0, 900, 61):
        # tolerance 1 mK: far below the 20 mK stability band, above solver error (~1e-8 K)
        assert bb.true_c(t0 + t) == pytest.approx(ref.sol(t)[0], abs=1e-3)


def test_step_response_closed_form_and_step_size_independence():
    clock = SimClock()
    bb = _bb(clock)
    bb.set("absolute", 35.0)
    t0 = clock.now()
    # e0 = 13 K > r tau = 6 K: slew for 70 s, then exponential with tau (hand closed form)
    assert bb.true_c(t0 + 70.0) == pytest.approx(29.0, abs=1e-12)
    assert bb.true_c(t0 + 190.0) == pytest.approx(35.0 - 6.0 * math.exp(-2.0), abs=1e-12)
    # evaluating through many small clock steps (each one a query) gives the closed form at the
    # clock's elapsed time (which carries its own float rounding at a 1.8e9 s epoch)
    for _ in range(1900):
        clock.sleep(0.1)
        bb.true_c()
    elapsed = clock.now() - t0
    assert bb.true_c() == pytest.approx(35.0 - 6.0 * math.exp(-(elapsed - 70.0) / 60.0),
                                        abs=1e-9)


def test_difference_mode_with_drifting_reference_matches_ode():
    clock = SimClock()
    drift = 0.5  # K/h, exaggerated to make the ramp lag visible
    bb = _bb(clock, reference_drift_k_per_h=drift)
    bb.set("difference", 10.0)
    b = drift / 3600.0
    ref = _reference(lambda t: 22.0 + b * t + 10.0, 3000.0)
    for t in (10.0, 100.0, 500.0, 3000.0):
        assert bb.true_c(clock.now() + t) == pytest.approx(ref.sol(t)[0], abs=1e-3)
    # steady lag behind a ramp b is b * tau (first-order system, ramp input)
    t = clock.now() + 3000.0
    assert bb.setpoint_c(t) - bb.true_c(t) == pytest.approx(b * TAU, rel=1e-3)


def test_stable_flag_needs_20_mk_for_10_s():
    clock = SimClock()
    bb = _bb(clock)
    bb.set("absolute", 35.0)
    t0 = clock.now()
    # |e| = 6 exp(-(t-70)/60) <= 0.02 from t = 70 + 60 ln(300); flag 10 s after that
    t_stable = 70.0 + 60.0 * math.log(300.0) + 10.0
    assert not bb.is_stable(t0 + t_stable - 0.01)
    assert bb.is_stable(t0 + t_stable + 0.01)


def test_readback_noise_is_small_deterministic_and_of_stated_rms():
    clock = SimClock()
    bb = _bb(clock, noise_mk=2.0, seed=9)
    t0 = clock.now()
    samples = np.array([bb.measured_c(t0 + 0.1 * i) - bb.true_c(t0 + 0.1 * i)
                        for i in range(4000)])
    # rms of 4000 Gaussian samples: relative standard error 1/sqrt(2N) = 1.1 %; allow 5 %
    assert samples.std() == pytest.approx(0.002, rel=0.05)
    assert bb.measured_c(t0 + 12.3) == bb.measured_c(t0 + 12.3)
    again = _bb(SimClock(), noise_mk=2.0, seed=9)
    assert again.measured_c(t0 + 12.3) == bb.measured_c(t0 + 12.3)


def test_limits_checked_and_faults_offset_the_emitter():
    clock = SimClock()
    bb = _bb(clock, min_c=-10.0, max_c=150.0)
    assert "outside" in bb.check("absolute", 151.0)
    assert "outside" in bb.check("difference", 130.0)  # 22 + 130 = 152 C
    assert bb.check("absolute", 150.0) is None
    clock.sleep(1000.0)
    bb.runaway = (clock.now(), 0.002)
    clock.sleep(100.0)
    assert bb.true_c() - 22.0 == pytest.approx(0.2, abs=1e-9)
    assert not bb.is_stable()
