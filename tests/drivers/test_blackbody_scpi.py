"""Blackbody driver against its simulator over a real loopback socket, through pyvisa
(`TCPIP::127.0.0.1::PORT::SOCKET`, pyvisa-py backend)."""

from __future__ import annotations

import math

import pytest

from drivers.blackbody_scpi import ScpiBlackbody
from drivers.errors import InstrumentRefused, LimitError
from drivers.transport import open_transport

NOISE_TOL_K = 0.010  # readback noise is 2 mK rms: 5 sigma


@pytest.fixture
def bb(sim):
    from tests.drivers.conftest import BB_SETTINGS

    t = open_transport(sim.servers.resource("blackbody", "visa"), instrument="blackbody",
                       clock=sim.clock, events=sim.events.append)
    drv = ScpiBlackbody(t, name="blackbody", settings=BB_SETTINGS)
    yield drv
    drv.close()


def test_identity_and_step_follow_first_order_with_slew_limit(sim, bb):
    assert bb.identify().split(",")[1] == "simulated blackbody"
    bb.set_temperature(35.0)
    assert bb.mode() == "absolute" and bb.setpoint() == pytest.approx(35.0)
    # Closed form (first-order lag with slew limit r, time constant tau; e0 = 13 K > r*tau = 6 K):
    # slew at 0.1 K/s for (13 - 6)/0.1 = 70 s, then T = 35 - 6 exp(-(t - 70)/60).
    sim.clock.sleep(40.0)
    assert bb.temperature() == pytest.approx(22.0 + 0.1 * 40.0, abs=NOISE_TOL_K)
    sim.clock.sleep(90.0)  # t = 130 s
    assert bb.temperature() == pytest.approx(35.0 - 6.0 * math.exp(-60.0 / 60.0), abs=NOISE_TOL_K)
    assert not bb.is_stable()
    # |e| <= 20 mK from 70 + 60 ln(300) = 412.2 s, held 10 s -> flag at 422.2 s
    sim.clock.sleep(422.5 - 130.0)
    assert bb.is_stable()


def test_difference_mode_tracks_the_reference(sim, bb):
    bb.set_difference(5.0)
    assert bb.mode() == "difference"
    sim.clock.sleep(3600.0)
    # reference drifts 0.1 K/h; the lag of a first-order system behind a ramp b is b*tau
    # = (0.1/3600)*60 = 1.7 mK, below the noise tolerance.
    assert bb.difference() == pytest.approx(5.0, abs=2 * NOISE_TOL_K)
    assert bb.reference_temperature() == pytest.approx(22.1, abs=NOISE_TOL_K)


def test_difference_is_one_exchange_and_agrees_with_the_two_readings(sim, bb):
    """MEAS:DIFF? reads both sensors at one instant: one command on the wire, and the same
    value as the two separate readings at that instant (the simulated noise is a function of
    the time, so the two routes see the same samples)."""
    bb.set_difference(3.0)
    sim.clock.sleep(1800.0)
    sent_before = len(sim.sent())
    diff = bb.difference()
    assert sim.sent()[sent_before:] == ["MEAS:DIFF?"]
    assert diff == pytest.approx(bb.temperature() - bb.reference_temperature(), abs=2e-4)


def test_difference_without_the_capability_asks_both_sensors(sim):
    """A controller that has no difference reading: the driver subtracts its two readings."""
    from tests.drivers.conftest import BB_SETTINGS

    class NoDifference(ScpiBlackbody):
        COMMANDS = {k: v for k, v in ScpiBlackbody.COMMANDS.items() if k != "difference"}

    t = open_transport(sim.servers.resource("blackbody", "visa"), instrument="blackbody",
                       clock=sim.clock, events=sim.events.append)
    drv = NoDifference(t, name="blackbody", settings=BB_SETTINGS)
    try:
        sent_before = len(sim.sent())
        drv.difference()
        assert sim.sent()[sent_before:] == ["MEAS:TEMP?", "MEAS:REF?"]
    finally:
        drv.close()


def test_station_limit_refused_before_sending(sim, bb):
    sent_before = len(sim.sent())
    with pytest.raises(LimitError, match="blackbody: 120"):
        bb.set_temperature(120.0)
    with pytest.raises(LimitError):
        bb.set_difference(-30.0)
    assert len(sim.sent()) == sent_before  # nothing reached the wire


def test_simulator_refusal_names_instrument_command_and_reply(sim):
    # Station limits wider than the source's own range (-10..150 C in the simulator): the
    # simulator's error reply must surface as InstrumentRefused.
    t = open_transport(sim.servers.resource("blackbody", "visa"), instrument="bb-wide",
                       clock=sim.clock)
    drv = ScpiBlackbody(t, name="bb-wide", settings={
        "limits": {"min_c": -50, "max_c": 400, "min_difference_k": -50, "max_difference_k": 50},
        "safe_c": 22.0})
    with pytest.raises(InstrumentRefused) as err:
        drv.set_temperature(300.0)
    assert err.value.instrument == "bb-wide"
    assert err.value.command == "SOUR:TEMP 300.0000"
    assert err.value.reply.startswith("ERR 200,")
    assert drv.last_error()[0] == 200
    drv.close()


def test_go_safe_returns_to_absolute_safe_setpoint(sim, bb):
    bb.set_difference(10.0)
    bb.go_safe()
    assert bb.mode() == "absolute" and bb.setpoint() == pytest.approx(22.0)
    snap = bb.snapshot()
    assert snap["setpoint"] == pytest.approx(22.0) and isinstance(snap["stable"], bool)
