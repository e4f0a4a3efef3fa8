"""Safing that still fails says so loudly: the console, the exit code, the notification and the
event log each carry which instrument was left live and what the operator must do by hand.

The run goes through `nightbench run` on the fast simulated bench; a blackbody step that cannot
settle in its timeout faults the run, and the blackbody driver's `go_safe` is stubbed to refuse,
as a controller locked at its front panel would. The stage must still be parked (safing tries
every instrument), the run must end with exit code SAFING_FAILED (7), the POST received by a
loopback HTTP server must be occasion "fault" with the shortfall, and the event log must hold a
flush-at-once `safing.incomplete` event. Leaving the bench safe on every way out, and telling a
person when it could not be, is common practice for unattended test benches.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from drivers.blackbody_scpi import ScpiBlackbody
from drivers.errors import InstrumentRefused
from station.cli import exitcodes, run_guard
from station.cli.main import main
from station.record.events import Event
from tests.loopback_http import json_receiver
from tests.station.fast_bench import fast_station_yaml

# Cannot settle to 1 mK (and hold 2 s) in 3 s (the fast blackbody's time constant is 5 s): the step faults.
RECIPE = """\
recipe: safing-refused
description: A setpoint that cannot settle in its timeout
steps:
  - move: {az: 5.0, el: 0.0}
  - blackbody: {mode: difference, value: 10.0, tolerance: 0.001, hold: 2, timeout: 3}
"""
REFUSAL = 'refused (error 222: setpoint locked at the front panel)'


@pytest.fixture()
def receiver():
    with json_receiver() as (url, received):
        yield url, received


def _refuse_safing(self: ScpiBlackbody) -> None:
    raise InstrumentRefused(self.name, REFUSAL, "SOUR:TEMP 22.0000",
                            'ERR 222,"setpoint locked"')


def test_a_blackbody_that_refuses_its_safe_setpoint_is_reported_loudly(
        tmp_path: Path, receiver, monkeypatch: pytest.MonkeyPatch,
        capsys: pytest.CaptureFixture[str]) -> None:
    url, received = receiver
    station = tmp_path / "station.yaml"
    station.write_text(fast_station_yaml("Safing test bench", timeout_s=0.3)
                       + f"notify: {{url: '{url}', when: [end, fault]}}\n", encoding="utf-8")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text(RECIPE, encoding="utf-8")
    monkeypatch.setattr(ScpiBlackbody, "go_safe", _refuse_safing)

    code = main(["run", str(recipe), "--station", str(station), "--runs", str(tmp_path / "runs"),
                 "--plain"])
    out = " ".join(capsys.readouterr().out.split())

    # (b) its own exit code, above FAULTED (1)
    assert code == exitcodes.SAFING_FAILED == 7
    # (a) the loud block: which instrument, why, and the manual steps with the safe setpoint
    assert "SAFING INCOMPLETE" in out
    assert "The bench was NOT left safe. Make it safe by hand before anything else:" in out
    assert f"blackbody: blackbody not safed: blackbody: {REFUSAL}" in out
    assert ("by hand: switch the blackbody controller to its standby, or set it to 22 C at "
            "the front panel; the source may be hot") in out
    assert "stage: stopped and parked at az +0.000 deg" in out  # safing went on to the stage
    # (c) one notification, occasion fault, with the shortfall and the manual steps
    assert len(received) == 1
    body = received[0]
    assert body["occasion"] == "fault" and body["state"] == "faulted"
    assert [s["instrument"] for s in body["safing_incomplete"]] == ["blackbody"]
    assert REFUSAL in body["safing_incomplete"][0]["problem"]
    assert body["by_hand"][0].startswith("blackbody: switch the blackbody controller")
    assert "SAFING INCOMPLETE" in body["cause"]
    # (d) the event log, flushed at once
    events = [json.loads(line) for line in
              next((tmp_path / "runs").glob("*/events.jsonl")).read_text().splitlines()]
    incomplete = [e for e in events if e["type"] == "safing.incomplete"]
    assert len(incomplete) == 1 and incomplete[0]["instruments"] == ["blackbody"]
    assert Event("safing.incomplete").flush


def test_a_later_complete_safing_supersedes_an_earlier_shortfall() -> None:
    """After a resume that safed the bench, the block of the earlier run is not shown again."""
    shortfall = {"type": "safing.incomplete", "shortfalls": [
        {"instrument": "stage", "problem": "stage not parked: stalled", "by_hand": "park it"}]}
    assert run_guard.safing_incomplete_block([shortfall])[1:3] == [
        "The bench was NOT left safe. Make it safe by hand before anything else:",
        "  stage: stage not parked: stalled"]
    assert run_guard.safing_incomplete_block(
        [shortfall, {"type": "safing.blackbody", "ok": True}]) == []


@pytest.mark.parametrize("state,cause,code", [
    ("faulted", "stage stalled; SAFING INCOMPLETE: stage not parked: x", exitcodes.SAFING_FAILED),
    ("aborted", "SIGINT; SAFING INCOMPLETE: blackbody not safed: x", exitcodes.SAFING_FAILED),
    ("faulted", "could not open the bench: x", exitcodes.INSTRUMENT),
    ("faulted", "stage stalled", exitcodes.FAULTED),
    ("aborted", "SIGINT", exitcodes.ABORTED),
])
def test_safing_failed_outranks_every_other_exit_code(state: str, cause: str, code: int) -> None:
    assert run_guard.run_exit_code(state, cause) == code
