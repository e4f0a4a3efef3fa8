"""Wheel driver against its simulator over a real loopback socket, through pyserial
(`socket://127.0.0.1:PORT`)."""

from __future__ import annotations

import pytest

from drivers.errors import LimitError
from drivers.transport import open_transport
from drivers.wheel_scpi import ScpiWheel
from tests.drivers.conftest import WHEEL_SETTINGS


@pytest.fixture
def wheel(sim):
    t = open_transport(sim.servers.resource("wheel", "serial"), instrument="wheel",
                       clock=sim.clock, events=sim.events.append)
    drv = ScpiWheel(t, name="wheel", settings=WHEEL_SETTINGS)
    yield drv
    drv.close()


def test_select_by_name_travels_the_short_way(sim, wheel):
    assert wheel.slot_count() == 6 and wheel.current_slot() == 1
    # slot 1 -> slot 5 on a 6-slot wheel: short way is 2 slots back, 2 * 1.5 s = 3.0 s
    assert wheel.select("blank") == 5
    assert wheel.is_moving() and wheel.current_slot() is None  # 0 on the wire while travelling
    sim.clock.sleep(2.99)
    assert wheel.is_moving()
    sim.clock.sleep(0.02)
    assert not wheel.is_moving() and wheel.current_slot() == 5
    assert wheel.snapshot()["target"] == "blank"


def test_home_goes_to_slot_one(sim, wheel):
    wheel.select(3)
    sim.clock.sleep(10.0)
    wheel.home()
    # homing: 2 slots back to slot 1 plus one slot's time to find the index = 4.5 s
    sim.clock.sleep(4.49)
    assert wheel.is_moving()
    sim.clock.sleep(0.02)
    assert wheel.current_slot() == 1


def test_unknown_slot_refused_before_sending(sim, wheel):
    n = len(sim.sent())
    with pytest.raises(LimitError, match="slot 7"):
        wheel.select(7)
    with pytest.raises(KeyError, match="no slot named"):
        wheel.select("siemens_star")
    assert len(sim.sent()) == n
