"""Stage driver against its simulator over a real loopback socket, through pyvisa's serial
resource pointed at TCP (`ASRLsocket://127.0.0.1:PORT::INSTR`)."""

from __future__ import annotations

import pytest

from drivers.errors import InstrumentRefused, LimitError
from drivers.scpi import InstrumentFault
from drivers.stage_scpi import ScpiStage
from drivers.transport import open_transport
from tests.drivers.conftest import STAGE_SETTINGS


@pytest.fixture
def stage(sim):
    t = open_transport(sim.servers.resource("stage", "asrl"), instrument="stage",
                       clock=sim.clock, events=sim.events.append)
    drv = ScpiStage(t, name="stage", settings=STAGE_SETTINGS)
    yield drv
    drv.close()


def test_move_duration_matches_trapezoidal_profile(sim, stage):
    assert stage.controller_axes() == ["az", "el"]
    stage.move_to({"az": 30.0, "el": 2.0})
    # Trapezoid (kinematics, rest to rest): d = 30 > v^2/a = 5 -> t = d/v + v/a = 3.5 s.
    # Triangle: d = 2 < 5 -> t = 2 sqrt(d/a) = 0.632 s.
    sim.clock.sleep(0.2)  # el still accelerating: x = a t^2 / 2
    assert stage.position("el") == pytest.approx(0.5 * 20.0 * 0.2 ** 2, abs=1e-3)
    sim.clock.sleep(0.5 - 0.2)  # el decelerating: x = d - a (T - t)^2 / 2, T = 2 sqrt(d/a)
    assert stage.position("el") == pytest.approx(2.0 - 10.0 * (2 * (2.0 / 20) ** 0.5 - 0.5) ** 2,
                                                 abs=1e-3)
    sim.clock.sleep(3.49 - 0.5)
    assert stage.is_moving()
    sim.clock.sleep(0.02)
    assert not stage.is_moving()
    assert stage.positions() == pytest.approx({"az": 30.0, "el": 2.0}, abs=1e-4)


def test_soft_limit_refused_before_any_axis_moves(sim, stage):
    n = len(sim.sent())
    with pytest.raises(LimitError, match="el 31"):
        stage.move_to({"az": 10.0, "el": 31.0})
    assert len(sim.sent()) == n
    assert sim.bench.stage_angles() == {"az": 0.0, "el": 0.0}


def test_simulator_refuses_beyond_its_soft_limits(sim):
    t = open_transport(sim.servers.resource("stage", "asrl"), instrument="wide-stage",
                       clock=sim.clock)
    drv = ScpiStage(t, name="wide-stage", settings={"axes": {"az": {"min": -60, "max": 60}}})
    with pytest.raises(InstrumentRefused, match="wide-stage") as err:
        drv.move_to({"az": 47.0})
    assert err.value.reply.startswith("ERR 200,")  # simulator soft limit is 45 deg
    drv.close()


def test_park_and_stall_fault(sim, stage):
    stage.park()
    sim.clock.sleep(2.0)
    assert stage.positions() == pytest.approx({"az": 0.0, "el": 5.0}, abs=1e-4)
    sim.bench.faults.add("stage", "stall", at_command=1, params={"axis": "az", "fraction": 0.5})
    stage.move_to({"az": 20.0})
    sim.clock.sleep(5.0)
    with pytest.raises(InstrumentFault, match="stage: axis az stalled"):
        stage.is_moving()
    # stalled at half the 2.5 s profile: by symmetry of the trapezoid, half the distance
    assert stage.position("az") == pytest.approx(10.0, abs=1e-3)
    stage.home()
    sim.clock.sleep(10.0)
    assert not stage.is_moving()
