"""The driver test kit: scripted conversations catch wrong commands; the contract runner reports."""

from __future__ import annotations

import pytest

from drivers.blackbody_scpi import ScpiBlackbody
from drivers.clock import SimClock
from drivers.errors import InstrumentRefused, InstrumentReplyError
from drivers.stage_scpi import ScpiStage
from drivers.testkit import ConversationMismatch, Script, ScriptedTransport, run_contract
from drivers.transport import open_transport
from simulators.bench import SimBench
from simulators.servers import start_bench_servers

BB = {"limits": {"min_c": 0.0, "max_c": 100.0, "min_difference_k": -20.0,
                 "max_difference_k": 60.0}, "safe_c": 22.0}

# The conversation the blackbody's command table (drivers/protocol.py) prescribes.
GOOD = Script.parse("""
    # absolute setpoint, then read back
    > SOUR:TEMP 35.0000
    < OK
    > SOUR:SETP?
    < 35.0000
    > MEAS:TEMP?
    < 34.9981
""")


class SloppyBlackbody(ScpiBlackbody):
    """A driver with a bug on purpose: two decimals and the wrong header."""

    def set_temperature(self, celsius: float) -> None:
        self._set(f"SOUR:TEMPERATURE {celsius:.2f}")


def test_a_correct_driver_follows_the_script() -> None:
    with ScriptedTransport(GOOD, instrument="blackbody") as link:
        bb = ScpiBlackbody(link, name="blackbody", settings=BB)
        bb.set_temperature(35.0)
        assert bb.setpoint() == 35.0
        assert bb.temperature() == pytest.approx(34.9981, abs=0)
    assert link.sent == ["SOUR:TEMP 35.0000", "SOUR:SETP?", "MEAS:TEMP?"]


def test_a_wrong_command_fails_with_a_readable_message() -> None:
    link = ScriptedTransport(GOOD, instrument="blackbody")
    bb = SloppyBlackbody(link, name="blackbody", settings=BB)
    with pytest.raises(ConversationMismatch) as err:
        bb.set_temperature(35.0)
    lines = str(err.value).splitlines()
    assert lines[0] == "blackbody: step 1 of 3: the driver sent a different command"
    assert lines[1] == "  expected: SOUR:TEMP 35.0000"
    assert lines[2] == "  sent:     SOUR:TEMPERATURE 35.00"
    # 'SOUR:TEMP' is common to both; they differ at the 10th character (space vs 'E')
    assert lines[3] == "            " + " " * 9 + "^ first difference at column 10"
    assert link.sent == []


def test_unsent_requests_fail_at_the_end_of_the_block() -> None:
    with pytest.raises(ConversationMismatch, match=r"2 scripted request\(s\) never sent"):
        with ScriptedTransport(GOOD, instrument="blackbody") as link:
            ScpiBlackbody(link, name="blackbody", settings=BB).set_temperature(35.0)


def test_extra_requests_fail_with_the_conversation_so_far() -> None:
    link = ScriptedTransport([("MEAS:TEMP?", "20.5")], instrument="blackbody")
    bb = ScpiBlackbody(link, name="blackbody", settings=BB)
    assert bb.temperature() == 20.5
    with pytest.raises(ConversationMismatch) as err:
        bb.temperature()
    assert "after the script ended (1 steps)" in str(err.value)
    assert "  1 > MEAS:TEMP?" in str(err.value)


def test_error_and_garbled_replies_behave_as_on_a_real_link() -> None:
    script = [("SOUR:TEMP 35.0000", 'ERR 200,"above the source maximum"'),
              ("MEAS:TEMP?", "twenty")]
    with ScriptedTransport(script, instrument="blackbody") as link:
        bb = ScpiBlackbody(link, name="blackbody", settings=BB)
        with pytest.raises(InstrumentRefused, match="error 200: above the source maximum"):
            bb.set_temperature(35.0)
        with pytest.raises(InstrumentReplyError, match="reply not understood"):
            bb.temperature()


def test_script_text_without_a_marker_is_refused_with_its_line() -> None:
    with pytest.raises(ValueError, match="script line 2: start with '>'"):
        Script.parse("> *IDN?\nOK\n")


class StuckStage(ScpiStage):
    """A driver bug the contract must catch: positions reported in the wrong unit (x1000)."""

    def position(self, axis: str) -> float:
        return 1000.0 * super().position(axis)


def test_contract_runner_catches_a_driver_reporting_wrong_positions() -> None:
    clock = SimClock()
    bench = SimBench.from_mapping({}, clock, seed=2)
    settings = {"axes": {"az": {"min": -40.0, "max": 40.0, "park": 0.0},
                         "el": {"min": -30.0, "max": 30.0, "park": 0.0}}}
    with start_bench_servers(bench) as servers, \
            open_transport(servers.resource("stage"), instrument="stage", clock=clock) as link:
        good = run_contract(ScpiStage(link, name="stage", settings=settings), clock)
        bad = run_contract(StuckStage(link, name="stage", settings=settings), clock)
    assert good.passed, good.summary()
    failed = {c.name for c in bad.failures()}
    assert "move_to reaches targets" in failed and "park" not in failed  # park: 0 * 1000 = 0
    with pytest.raises(AssertionError, match="stage \\(stage\\): 5/6 checks passed"):
        bad.raise_if_failed()
