"""One in-process run per fault kind: it either recovers (and the log says how) or faults safely.

Each test runs a short recipe (target, move, blackbody, capture) on the simulated bench in
simulated time with one fault rule, through the same `execute` the command line uses. A fault
that the recovery policy can ride out must leave a complete run whose event log shows the retry,
reconnect or re-grab; one it cannot must end `faulted` with the instrument named in the cause,
the safing events written and the bench left safe. Every run is bounded: the blackbody step has
a 120 s (simulated) timeout, wire timeouts are 0.3 s (real: pyvisa/pyserial wait on sockets),
and `pytest-timeout`-free bounds come from the policy's finite retries.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pytest
import tifffile
from rich.console import Console

from drivers.clock import SimClock
from simulators.faults import FaultPlan
from station.cli.console import RunConsole
from station.record.events import read_events
from station.engine.runner import execute, load_inputs, new_run_folder
from tests.station.fast_bench import fast_station_yaml

FRAMES = 8
SETPOINT_K = 10.0
TOLERANCE_K = 0.05

STATION = fast_station_yaml("Fast simulated bench for fault tests", timeout_s=0.3)

RECIPE = f"""\
recipe: fault-check
description: Short plan touching every instrument once
steps:
  - target: pinhole_grid
  - move: {{az: 5.0, el: 0.0}}
  - blackbody: {{mode: difference, value: {SETPOINT_K}, tolerance: {TOLERANCE_K}, hold: 5,
                 timeout: 120}}
  - capture: {{name: grab, frames: {FRAMES}, keep: both}}
"""


@pytest.fixture(scope="module")
def files(tmp_path_factory: pytest.TempPathFactory) -> Path:
    base = tmp_path_factory.mktemp("faults")
    (base / "station.yaml").write_text(STATION, encoding="utf-8")
    (base / "recipe.yaml").write_text(RECIPE, encoding="utf-8")
    return base


def run_with(files: Path, tmp_path: Path, plan: FaultPlan):
    """Run the recipe in simulated time with `plan`; returns (outcome, run folder, events)."""
    inputs = load_inputs(files / "recipe.yaml", station_path=files / "station.yaml",
                         uut_path=None, overrides={})
    clock = SimClock()
    run = new_run_folder(inputs, tmp_path / "runs", clock)
    live = RunConsole(Console(file=io.StringIO()), plain=True, clock=clock)
    outcome = execute(inputs, run, clock, live, seed=3, fault_plan=plan)
    run.close()
    return outcome, run.path, read_events(run.path / "events.jsonl")


def one_fault(instrument: str, kind: str, **trigger) -> FaultPlan:
    # t0: the simulated clock's start, so `after_s` counts from the start of the run.
    plan = FaultPlan(seed=11, t0=SimClock().now())
    plan.add(instrument, kind, **trigger)
    return plan


def of_type(events: list[dict], kind: str, **match) -> list[dict]:
    return [e for e in events if e["type"] == kind
            and all(e.get(k) == v for k, v in match.items())]


def assert_complete_capture(run: Path) -> None:
    """All planned frames, each one distinct (counters strictly increasing)."""
    import json

    meta = json.loads((run / "frames" / "grab.json").read_text(encoding="utf-8"))
    assert meta["count"] == FRAMES
    counters = meta["counters"]
    assert all(b > a for a, b in zip(counters, counters[1:]))
    with tifffile.TiffFile(run / "frames" / "grab.stack.tif") as tf:
        assert len(tf.pages) == FRAMES
        shapes = {p.shape for p in tf.pages}
    assert len(shapes) == 1  # no short frame slipped in


def assert_faulted_safely(outcome, events: list[dict], instrument: str) -> None:
    assert outcome.state == "faulted"
    assert instrument in outcome.cause, outcome.cause
    assert not outcome.safing_problems
    safed = of_type(events, "safing.blackbody", ok=True) + of_type(events, "safing.stage", ok=True)
    assert len(safed) == 2


def assert_stage_left_for_a_person(outcome, events: list[dict]) -> None:
    """A stalled or limit-tripped axis refuses moves until homed (common practice for motion
    controllers: a tripped axis is not driven automatically). Safing then sets the blackbody
    safe, leaves the stage where it stopped and says so, and the cause tells what to do."""
    assert outcome.state == "faulted"
    assert "stage" in outcome.cause and "HOME" in outcome.cause
    assert len(of_type(events, "safing.blackbody", ok=True)) == 1
    assert [p for p in outcome.safing_problems if not p.startswith("stage not parked")] == []
    assert "SAFING INCOMPLETE" in outcome.cause


def settled_reading(events: list[dict]) -> float:
    return float(of_type(events, "blackbody.settled")[-1]["reading"])


# -- wire faults: the retry policy rides them out -----------------------------------------------

@pytest.mark.parametrize("instrument,kind,expect", [
    ("blackbody", "timeout", "timeout"),     # no reply: read times out, retried
    ("wheel", "garbled", "reply"),           # high bit flipped: not text, retried
    ("stage", "truncated", "timeout"),       # half a line, no terminator: read times out
])
def test_wire_fault_is_retried_and_run_completes(files: Path, tmp_path: Path, instrument: str,
                                                 kind: str, expect: str) -> None:
    outcome, run, events = run_with(files, tmp_path, one_fault(instrument, kind, at_command=3))
    assert outcome.state == "complete", outcome.cause
    retries = of_type(events, "transport.retry", instrument=instrument)
    assert len(retries) == 1 and retries[0]["kind"] == expect
    assert_complete_capture(run)
    # The settled reading still meets the recipe's tolerance (the run's own acceptance test).
    assert abs(settled_reading(events) - SETPOINT_K) <= TOLERANCE_K


def test_dropped_connection_is_reconnected(files: Path, tmp_path: Path) -> None:
    outcome, run, events = run_with(files, tmp_path, one_fault("blackbody", "disconnect",
                                                               at_command=4))
    assert outcome.state == "complete", outcome.cause
    assert len(of_type(events, "transport.reconnect", instrument="blackbody")) >= 1
    assert_complete_capture(run)
    assert abs(settled_reading(events) - SETPOINT_K) <= TOLERANCE_K


def test_instrument_restart_is_reconnected_or_faults_safely(files: Path, tmp_path: Path) -> None:
    """A power-cycled wheel loses its position: either the step sees it and faults, or the
    retried command lands on the restarted wheel and the run completes at the right slot."""
    outcome, run, events = run_with(files, tmp_path, one_fault("wheel", "restart", at_command=4))
    assert len(of_type(events, "transport.reconnect", instrument="wheel")) >= 1
    if outcome.state == "complete":
        assert of_type(events, "step.done", step="s1.target")[0]["result"]["slot"] == 2
        assert_complete_capture(run)
    else:
        assert_faulted_safely(outcome, events, "wheel")


# -- physics faults -------------------------------------------------------------------------------

def test_blackbody_that_never_settles_faults_after_its_timeout(files: Path, tmp_path: Path) -> None:
    outcome, run, events = run_with(files, tmp_path, one_fault("blackbody", "unsettled",
                                                               at_command=1))
    assert_faulted_safely(outcome, events, "blackbody")
    start = of_type(events, "step.start", step="s3.blackbody")[0]["t"]
    fault = of_type(events, "state", dest="faulted")[0]["t"]
    # The recipe's timeout (120 s) bounds the wait; a poll interval (1 s) of slack, plus the
    # commands of one poll.
    assert 120.0 <= fault - start <= 125.0
    assert not (run / "frames" / "grab.json").exists()


def test_blackbody_drift_mid_capture_discards_the_capture_and_faults(files: Path,
                                                                     tmp_path: Path) -> None:
    """Drifting away for good: the capture is discarded (frames set aside) and the guard's wait
    runs into the settling timeout; the cause names the blackbody."""
    probe, _, ev = run_with(files, tmp_path / "probe", FaultPlan())
    capture_start = of_type(ev, "step.start", step="s4.capture")[0]["t"] - ev[0]["t"]
    plan = one_fault("blackbody", "drift", after_s=capture_start + 0.1,
                     params={"rate_k_per_s": 0.5})
    outcome, run, events = run_with(files, tmp_path / "drift", plan)
    assert probe.state == "complete"
    assert len(of_type(events, "capture.discarded", step="s4.capture")) == 1
    assert_faulted_safely(outcome, events, "blackbody")
    aside = list((run / "frames" / "abandoned").iterdir())
    assert len(aside) == 1 and not (run / "frames" / "grab.json").exists()


@pytest.mark.parametrize("kind", ["stall", "hard_limit"])
def test_stage_fault_stops_the_run_safely(files: Path, tmp_path: Path, kind: str) -> None:
    outcome, run, events = run_with(files, tmp_path, one_fault("stage", kind, at_command=1,
                                                               params={"axis": "az"}))
    assert_stage_left_for_a_person(outcome, events)
    assert "axis az" in outcome.cause
    # Where it stopped: a stall (fraction 0.5 by default) halfway along 0 -> 5 deg, i.e. 2.5 deg;
    # a runaway at the hard limit, 50 deg (the simulated bench's hard_max for az).
    expected = "2.500" if kind == "stall" else "50.000"
    assert f"at {expected}" in outcome.cause


# -- grabber faults: detected from counters and shape, re-grabbed ----------------------------------

@pytest.mark.parametrize("kind,event", [("drop", "frame.gap"), ("repeat", "frame.rejected"),
                                        ("short", "frame.rejected")])
def test_grabber_fault_is_regrabbed(files: Path, tmp_path: Path, kind: str, event: str) -> None:
    outcome, run, events = run_with(files, tmp_path, one_fault("grabber", kind, at_command=4))
    assert outcome.state == "complete", outcome.cause
    assert len(of_type(events, event, step="s4.capture")) == 1
    assert_complete_capture(run)
    stack = tifffile.imread(run / "frames" / "grab.stack.tif")
    # No frame stored twice: a repeated frame would be bit-identical to its neighbour, while two
    # real frames differ by temporal noise (NETD-derived noise in the simulated camera).
    assert all(not np.array_equal(stack[i], stack[i + 1]) for i in range(FRAMES - 1))
