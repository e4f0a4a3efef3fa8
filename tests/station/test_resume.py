"""Resume in process: refusals that name the file, the changed-input check, and a faulted run
carried on to completion with every planned step journalled exactly once."""

from __future__ import annotations

import io
import json
import shutil
from pathlib import Path

import pytest
from rich.console import Console

from drivers.clock import SimClock
from simulators.faults import FaultPlan
from station.cli.console import RunConsole
from station.record.events import read_events
from station.record.manifest import Manifest
from station.engine.resume import ResumeRefused, check_sources, resume_run
from station.engine.runner import execute, load_inputs, new_run_folder, plan_summary

REPO = Path(__file__).resolve().parents[2]
TRUTH = REPO / "station" / "data" / "demo_camera_truth.yaml"
FRAMES = 6

STATION = (REPO / "station" / "data" / "sim_station.yaml").read_text(encoding="utf-8").replace(
    "camera_truth: demo_camera_truth.yaml", f"camera_truth: {TRUTH}").replace(
    "time_constant_s: 60.0, slew_k_per_s: 0.1", "time_constant_s: 5.0, slew_k_per_s: 5.0")

RECIPE = f"""\
recipe: resume-check
description: Target, move, settle, capture
steps:
  - target: pinhole_grid
  - move: {{az: 5.0, el: 0.0}}
  - blackbody: {{mode: difference, value: 10.0, tolerance: 0.05, hold: 5, timeout: 120}}
  - capture: {{name: grab, frames: {FRAMES}, keep: both}}
"""


def _console() -> RunConsole:
    return RunConsole(Console(file=io.StringIO()), plain=True, clock=SimClock())


@pytest.fixture(scope="module")
def faulted_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A run that faulted at its move step (stage stall): target done, the rest open."""
    base = tmp_path_factory.mktemp("resume")
    (base / "station.yaml").write_text(STATION, encoding="utf-8")
    (base / "recipe.yaml").write_text(RECIPE, encoding="utf-8")
    inputs = load_inputs(base / "recipe.yaml", station_path=base / "station.yaml", uut_path=None,
                         overrides={})
    clock = SimClock()
    run = new_run_folder(inputs, base / "runs", clock)
    manifest = Manifest.begin(clock, inputs=run.inputs, plan=plan_summary(inputs, 5))
    manifest.write(run.path)
    plan = FaultPlan(seed=1)
    plan.add("stage", "stall", at_command=1, params={"axis": "az"})
    outcome = execute(inputs, run, clock, _console(), seed=5, fault_plan=plan, manifest=manifest)
    run.close()
    manifest.close(run.path, state=outcome.state, cause=outcome.cause, clock=clock)
    assert outcome.state == "faulted"
    return run.path


@pytest.fixture
def copy_of(faulted_run: Path, tmp_path: Path) -> Path:
    target = tmp_path / faulted_run.name
    shutil.copytree(faulted_run, target)
    return target


def test_faulted_run_resumes_to_completion(copy_of: Path) -> None:
    before = [json.loads(x)["step"] for x in (copy_of / "journal.jsonl").read_text().splitlines()]
    assert before == ["s1.target"]
    state, cause, path = resume_run(copy_of, console=_console())
    assert (state, cause) == ("complete", "all steps done")
    steps = [json.loads(x)["step"] for x in (path / "journal.jsonl").read_text().splitlines()]
    assert steps == ["s1.target", "s2.move", "s3.blackbody", "s4.capture"]
    meta = json.loads((path / "frames" / "grab.json").read_text(encoding="utf-8"))
    assert meta["count"] == FRAMES
    events = read_events(path / "events.jsonl")
    settled = [e for e in events if e["type"] == "blackbody.settled"][-1]
    assert abs(settled["reading"] - 10.0) <= 0.05  # the recipe's own tolerance
    # The restore redid the completed target step before the first open step.
    assert [e["step"] for e in events if e["type"] == "resume.restore"] == ["s1.target"]
    manifest = json.loads((path / "manifest.json").read_text(encoding="utf-8"))
    assert [s["kind"] for s in manifest["sessions"]] == ["start", "resume"]
    assert manifest["sessions"][1]["previous_state"] == "faulted"
    # Resuming a complete run does nothing.
    assert resume_run(path, console=_console())[0] == "complete"


def test_corrupt_journal_is_refused_naming_the_file(copy_of: Path) -> None:
    journal = copy_of / "journal.jsonl"
    journal.write_text(journal.read_text().replace('"pinhole_grid"', '"pinhole_grit"'))
    with pytest.raises(ResumeRefused, match=r"journal\.jsonl, line 1: .*checksum") as info:
        resume_run(copy_of, console=_console())
    assert isinstance(info.value, ValueError)  # the command line's exit code 2


def test_corrupt_manifest_is_refused_naming_the_file(copy_of: Path) -> None:
    (copy_of / "manifest.json").write_text("{ not json", encoding="utf-8")
    with pytest.raises(ResumeRefused, match=r"manifest\.json: not valid JSON"):
        resume_run(copy_of, console=_console())


def test_changed_recipe_is_refused_unless_forced(copy_of: Path) -> None:
    index = json.loads((copy_of / "inputs" / "inputs.json").read_text(encoding="utf-8"))
    recipe_source = Path(index["recipe"]["source"])
    original = recipe_source.read_text(encoding="utf-8")
    try:
        recipe_source.write_text(original.replace("frames: 6", "frames: 7"), encoding="utf-8")
        assert [c.role for c in check_sources(index)] == ["recipe"]
        with pytest.raises(ResumeRefused, match=f"recipe file {recipe_source}.*--force"):
            resume_run(copy_of, console=_console())
        state, _, path = resume_run(copy_of, console=_console(), force=True)
    finally:
        recipe_source.write_text(original, encoding="utf-8")
    assert state == "complete"
    # Forced: the run folder's copy was used, so the planned count holds, not the edited one.
    meta = json.loads((path / "frames" / "grab.json").read_text(encoding="utf-8"))
    assert meta["count"] == FRAMES
    assert check_sources(index) == []


def test_not_a_run_folder_is_refused(tmp_path: Path) -> None:
    with pytest.raises(ResumeRefused, match="not a run folder"):
        resume_run(tmp_path, console=_console())


def test_preflight_refuses_a_swapped_instrument_on_resume(tmp_path):
    # Resume must talk to the same instruments the run started with: a different identity
    # string (*IDN?, IEEE 488.2 common command) stops preflight before anything moves.
    from drivers.clock import SimClock
    from station.engine.bench import open_bench
    from station.engine.runner import load_inputs, preflight
    from station.engine.sequencer import PreflightFailed

    inputs = load_inputs("distortion-grid", station_path=None, uut_path=None, overrides={})
    logged: list[tuple] = []

    class Quiet:
        def log(self, *args):
            logged.append(args)

    with open_bench(inputs.station, SimClock()) as bench:
        same = {r: i.identify() for r, i in bench.instruments().items()}
        preflight(inputs, bench, tmp_path, lambda *a, **k: None, Quiet(), same)
        swapped = {**same, "blackbody": "Other maker,BB-9,0001,2.0"}
        with pytest.raises(PreflightFailed, match="blackbody is not the instrument this run "
                           "started with"):
            preflight(inputs, bench, tmp_path, lambda *a, **k: None, Quiet(), swapped)
