"""Transport failures: a timeout, a garbled reply, a truncated reply and a dropped connection each
give an error naming the instrument (or are recovered by a bounded, logged retry). Back-off waits
run on SimClock; reply timeouts use a short 0.2 s transport timeout to keep the file fast. Each
fault is tried over pyvisa, over pyserial and over the in-process link (`sim+local`), which must
fail and recover exactly as the two sockets do."""

from __future__ import annotations

import logging
import socket

import pytest

from drivers.blackbody_scpi import ScpiBlackbody
from drivers.clock import SimClock
from drivers.errors import InstrumentConnectionError, InstrumentReplyError, InstrumentTimeout
from drivers.recovery import RetryPolicy
from drivers.transport import LocalTransport, ResourceInfo, open_transport
from simulators.servers import answerer
from tests.drivers.conftest import BB_SETTINGS

STYLES = ["visa", "serial", "local"]


def _bb(sim, style, policy=None, timeout_s=0.2):
    link = dict(instrument="blackbody", clock=sim.clock, timeout_s=timeout_s, policy=policy,
                events=sim.events.append)
    if style == "local":
        t = LocalTransport(ResourceInfo("sim+local", "local", "local", "blackbody"),
                           answer=answerer(sim.servers.protocols["blackbody"]),
                           read_termination="\n", write_termination="\n", **link)
    else:
        t = open_transport(sim.servers.resource("blackbody", style), **link)
    return ScpiBlackbody(t, name="blackbody", settings=BB_SETTINGS)


@pytest.mark.parametrize("style", STYLES)
@pytest.mark.parametrize("kind,error", [("timeout", InstrumentTimeout),
                                        ("garbled", InstrumentReplyError),
                                        ("truncated", InstrumentTimeout),
                                        ("disconnect", None)])
def test_single_fault_is_retried_and_logged(sim, style, kind, error, caplog):
    drv = _bb(sim, style, RetryPolicy(retries=2, backoff_s=0.5, backoff_factor=2.0))
    drv.identify()
    sim.bench.faults.add("blackbody", kind, at_command=2)
    t0 = sim.clock.now()
    with caplog.at_level(logging.WARNING, logger="nightbench.transport"):
        assert drv.temperature() == pytest.approx(22.0, abs=0.01)
    retries = sim.of_type("transport.retry")
    assert [r["attempt"] for r in retries] == [1]
    assert retries[0]["instrument"] == "blackbody" and retries[0]["command"] == "MEAS:TEMP?"
    if error is not None:
        assert error.__name__ in retries[0]["error"] or "blackbody" in retries[0]["error"]
    assert "transport.retry" in caplog.text
    # first back-off is backoff_s, in clock time (no real sleep)
    assert sim.clock.now() - t0 == pytest.approx(0.5)
    drv.close()


@pytest.mark.parametrize("style", STYLES)
def test_persistent_timeout_gives_up_after_bounded_retries(sim, style):
    drv = _bb(sim, style, RetryPolicy(retries=3, backoff_s=0.1, backoff_factor=2.0))
    sim.bench.faults.add("blackbody", "timeout", at_command=1, times=None)
    t0 = sim.clock.now()
    with pytest.raises(InstrumentTimeout) as err:
        drv.temperature()
    assert err.value.instrument == "blackbody" and err.value.command == "MEAS:TEMP?"
    assert "blackbody: no reply within 0.2 s" in str(err.value)
    assert len(sim.of_type("transport.retry")) == 3          # bounded: exactly `retries`
    assert len(sim.of_type("transport.give_up")) == 1
    # back-off 0.1 + 0.2 + 0.4 s of clock time
    assert sim.clock.now() - t0 == pytest.approx(0.7)
    drv.close()


@pytest.mark.parametrize("style", STYLES)
def test_persistent_garbage_names_instrument_command_and_reply(sim, style):
    drv = _bb(sim, style, RetryPolicy(retries=1, backoff_s=0.0))
    sim.bench.faults.add("blackbody", "garbled", at_command=1, times=None)
    with pytest.raises(InstrumentReplyError) as err:
        drv.temperature()
    assert err.value.instrument == "blackbody" and err.value.command == "MEAS:TEMP?"
    assert len(sim.of_type("transport.retry")) == 1
    drv.close()


def test_give_up_after_clock_budget(sim):
    drv = _bb(sim, "serial", RetryPolicy(retries=10, backoff_s=1.0, backoff_factor=2.0,
                                         give_up_after_s=5.0))
    sim.bench.faults.add("blackbody", "garbled", at_command=1, times=None)
    with pytest.raises(InstrumentReplyError):
        drv.temperature()
    # waits 1 + 2 = 3 s; the next (4 s) would pass the 5 s budget -> give up after 2 retries
    assert len(sim.of_type("transport.retry")) == 2
    drv.close()


def _dead_port() -> int:
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    return port


@pytest.mark.parametrize("resource", ["TCPIP::127.0.0.1::{port}::SOCKET",
                                      "socket://127.0.0.1:{port}"])
def test_nobody_listening_gives_connection_error_naming_instrument(resource):
    clock = SimClock()
    events: list[dict] = []
    res = resource.format(port=_dead_port())
    with pytest.raises(InstrumentConnectionError, match="wheel: connection to"):
        t = open_transport(res, instrument="wheel", clock=clock, timeout_s=0.2,
                           policy=RetryPolicy(retries=1, backoff_s=0.1), events=events.append)
        t.query("*IDN?")
    if resource.startswith("TCPIP"):  # pyvisa opens a dead port fine; the write fails
        assert [e["type"] for e in events] == ["transport.retry", "transport.reconnect",
                                               "transport.give_up"]


def test_restart_loses_instrument_state(sim):
    drv = _bb(sim, "serial", RetryPolicy(retries=2, backoff_s=0.1))
    drv.set_temperature(40.0)
    sim.bench.faults.add("blackbody", "restart", at_command=3)
    assert drv.setpoint() == pytest.approx(40.0)
    assert drv.setpoint() == pytest.approx(22.0)  # answered after reconnect: state lost
    assert [e["type"] for e in sim.events if e["type"].startswith("transport.")] == [
        "transport.retry", "transport.reconnect"]
    drv.close()


def test_refusal_is_not_retried(sim):
    drv = _bb(sim, "serial")
    sim.bench.blackbody.max_c = 30.0
    with pytest.raises(Exception, match="ERR 200"):
        drv.set_temperature(35.0)
    assert sim.of_type("transport.retry") == []
    drv.close()


def test_io_events_record_command_reply_and_clock_time(sim):
    drv = _bb(sim, "visa")
    sim.clock.sleep(12.0)
    drv.identify()
    io = sim.of_type("io")[-1]
    assert io == {"type": "io", "instrument": "blackbody", "command": "*IDN?",
                  "reply": "nightbench simulator,simulated blackbody,NB-SIM-BB,1.0", "t": sim.clock.now()}
    drv.close()


def test_seeded_random_wire_faults_are_all_recovered_and_accounted(sim):
    # 5 % of commands hit one of the wire faults (seeded, so this run is the same every time).
    # With 3 retries a query fails only if 4 faults strike in a row: p = 0.05^4, negligible.
    for kind in ("timeout", "garbled", "truncated", "disconnect"):
        sim.bench.faults.add("blackbody", kind, probability=0.0125)
    drv = _bb(sim, "serial", RetryPolicy(retries=3, backoff_s=0.05))
    readings = [drv.temperature() for _ in range(150)]
    assert all(abs(r - 22.0) < 0.01 for r in readings)
    fired = sum(sim.bench.faults.counts().values())
    assert fired > 0
    # every fault cost exactly one retry: the log accounts for all of them
    assert len(sim.of_type("transport.retry")) == fired
    assert sim.of_type("transport.give_up") == []
    drv.close()
