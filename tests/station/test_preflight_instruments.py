"""Preflight asks each instrument itself, before anything moves.

The station's limits are checked first (station/inputs/limits.py); then every blackbody step,
every stage move (scan poses included) and every wheel target is put to the instrument that will
carry it out, and the blackbody's safing path is dry-run once. A refusal faults the run at
preflight: the cause names the step, its recipe file:line and the instrument's own reason, and
no step has started (no `step.start` in the event log). Safety rule (common practice for
automated benches): refuse out-of-range commands before anything moves.
"""

from __future__ import annotations

import io
from pathlib import Path

import pytest
from rich.console import Console

from drivers.blackbody_scpi import ScpiBlackbody
from drivers.clock import SimClock
from drivers.kinds import DeclaredStage, DeclaredWheel
from station.cli.console import RunConsole
from station.engine.runner import execute, load_inputs, new_run_folder
from station.record.events import read_events
from tests.station.fast_bench import fast_station_yaml

RECIPE = """\
recipe: preflight-ask
description: One step for each instrument
steps:
  - target: pinhole_grid
  - move: {az: 5.0, el: 0.0}
  - blackbody: {mode: difference, value: 10.0, tolerance: 0.05, hold: 5, timeout: 120}
"""


@pytest.fixture()
def files(tmp_path: Path) -> Path:
    (tmp_path / "station.yaml").write_text(fast_station_yaml("Preflight bench", timeout_s=0.3),
                                           encoding="utf-8")
    (tmp_path / "recipe.yaml").write_text(RECIPE, encoding="utf-8")
    return tmp_path


def run(files: Path) -> tuple[object, list[dict]]:
    inputs = load_inputs(files / "recipe.yaml", station_path=files / "station.yaml",
                         uut_path=None, overrides={})
    clock = SimClock()
    folder = new_run_folder(inputs, files / "runs", clock)
    live = RunConsole(Console(file=io.StringIO()), plain=True, clock=clock)
    outcome = execute(inputs, folder, clock, live, seed=3)
    folder.close()
    return outcome, read_events(folder.path / "events.jsonl")


def assert_refused_before_anything_moved(outcome, events: list[dict], *parts: str) -> None:
    assert outcome.state == "faulted"
    assert outcome.cause.startswith("preflight: "), outcome.cause
    for part in parts:
        assert part in outcome.cause, outcome.cause
    assert [e for e in events if e["type"] == "step.start"] == []
    assert not outcome.safing_problems  # the bench is still safed on the way out


@pytest.mark.parametrize("cls,method,step,line,role", [
    (ScpiBlackbody, "setpoint_problem", "s3.blackbody", 6, "blackbody"),
    (DeclaredStage, "position_problem", "s2.move", 5, "stage"),
    (DeclaredWheel, "slot_problem", "s1.target", 4, "wheel"),
])
def test_an_instrument_refusal_faults_the_run_at_preflight(
        files: Path, monkeypatch: pytest.MonkeyPatch, cls: type, method: str, step: str,
        line: int, role: str) -> None:
    reason = f"invented {role} reason"
    planned = {"blackbody": 10.0, "stage": 5.0, "wheel": 2}[role]  # refuse the plan, not safing
    monkeypatch.setattr(cls, method, lambda self, *args: reason if args[-1] == planned else None)
    outcome, events = run(files)
    assert_refused_before_anything_moved(
        outcome, events, f"{step} ({files / 'recipe.yaml'}:{line}:",
        f"the {role} refuses: {reason}")


def test_a_failing_safing_dry_run_faults_the_run_at_preflight(
        files: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(ScpiBlackbody, "safing_problem",
                        lambda self: "the safing commands fail: invented refusal")
    outcome, events = run(files)
    assert_refused_before_anything_moved(
        outcome, events, "blackbody safing dry run: the safing commands fail: invented refusal",
        str(files / "station.yaml"))


def test_the_instruments_accept_a_plan_within_their_ranges(files: Path) -> None:
    """The same plan, no stub: preflight passes and every step runs."""
    outcome, events = run(files)
    assert outcome.state == "complete", outcome.cause
    assert len([e for e in events if e["type"] == "step.done"]) == 3
