"""Fixtures: the built-in recipes run once per session (small overrides, through the command
line, three at a time), a faulted run, and headless Chromium driven by Playwright."""

from __future__ import annotations

import io
import os
import shutil
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.services import missing_service

REPO = Path(__file__).resolve().parents[2]
CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                  "--no-first-run", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync"]
ARTIFACTS = REPO / "tests" / "artifacts"

# Small overrides keep each run to seconds; every recipe still runs all of its step kinds.
RECIPES = {
    "distortion-grid": ["--set", "frames=4"],
    "distortion-scan": ["--set", "az_step=11", "--set", "el_step=8.5", "--set", "frames=2"],
    "sitf-sweep": ["--set", "frames=8", "--set", "hold=5"],
}

FAULT_RECIPE = """\
recipe: fault-report
description: a ridden-out wire fault, then a blackbody that never settles
steps:
  - note: "report check: this run is meant to fault"
  - target: pinhole_grid
  - move: {az: 5.0, el: 0.0}
  - blackbody: {mode: difference, value: 10.0, tolerance: 0.05, hold: 5, timeout: 120}
  - capture: {name: grab, frames: 4, keep: both}
"""


@pytest.fixture(scope="session")
def report_root(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return tmp_path_factory.mktemp("reports")


@pytest.fixture(scope="session")
def history_sqlite(report_root: Path) -> str:
    return f"sqlite:///{report_root / 'history.sqlite'}"


@pytest.fixture(scope="session")
def recipe_runs(report_root: Path, history_sqlite: str) -> dict[str, Path]:
    """Each quick built-in recipe run by `nightbench run` (end-of-run hook included)."""
    env = dict(os.environ, NIGHTBENCH_HISTORY_URL=history_sqlite, PYTHONPATH=str(REPO))
    procs = {name: subprocess.Popen(
        [sys.executable, "-m", "station", "run", name, "--runs", str(report_root / name),
         "--plain", *args], cwd=report_root, env=env, text=True, stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT) for name, args in RECIPES.items()}
    out = {}
    for name, proc in procs.items():
        text, _ = proc.communicate(timeout=240)
        # 0: the UUT passed; 6: it completed and failed a spec limit (the demo fails NETD)
        assert proc.returncode in (0, 6), f"{name}: exit {proc.returncode}\n{text[-2000:]}"
        assert "history: recorded" in text and "report: " in text, text[-1500:]
        (folder,) = [p for p in (report_root / name).iterdir() if p.is_dir()]
        out[name] = folder
    return out


@pytest.fixture(scope="session")
def faulted_run(report_root: Path, history_sqlite: str) -> Path:
    """A run with a wire fault the bench rides out, then a blackbody that never settles."""
    from rich.console import Console

    from drivers.clock import SimClock
    from simulators.faults import FaultPlan
    from station.cli.console import RunConsole
    from station.engine.runner import execute, load_inputs, new_run_folder, plan_summary
    from station.record.manifest import Manifest
    from station.report.finish import finish_run
    from tests.station.fast_bench import fast_station_yaml

    base = report_root / "faulted"
    base.mkdir()
    (base / "station.yaml").write_text(fast_station_yaml("Fast bench", timeout_s=0.3))
    (base / "recipe.yaml").write_text(FAULT_RECIPE)
    inputs = load_inputs(base / "recipe.yaml", station_path=base / "station.yaml",
                         uut_path=None, overrides={})
    clock = SimClock()
    plan = FaultPlan(seed=11, t0=clock.now())
    plan.add("wheel", "garbled", at_command=3)
    plan.add("blackbody", "unsettled", at_command=1)
    run = new_run_folder(inputs, base / "runs", clock)
    manifest = Manifest.begin(clock, inputs=run.inputs, plan=plan_summary(inputs, 3))
    manifest.write(run.path)
    live = RunConsole(Console(file=io.StringIO()), plain=True, clock=clock)
    outcome = execute(inputs, run, clock, live, seed=3, fault_plan=plan, manifest=manifest)
    run.close()
    manifest.close(run.path, state=outcome.state, cause=outcome.cause, clock=clock)
    assert outcome.state == "faulted", outcome.cause
    finish_run(run.path, history_sqlite)
    return run.path


@pytest.fixture(scope="session")
def all_runs(recipe_runs: dict[str, Path], faulted_run: Path) -> dict[str, Path]:
    return {**recipe_runs, "faulted": faulted_run}


@pytest.fixture(scope="session")
def browser(tmp_path_factory: pytest.TempPathFactory) -> Iterator[object]:
    """A persistent Chromium context on a fresh profile folder (Debian's browser, never a
    downloaded one)."""
    if not CHROMIUM.is_file():
        missing_service("Chromium not found at /usr/bin/chromium (apt-get install chromium)")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        missing_service("the playwright package is not installed (pip install playwright)")
    profile = tmp_path_factory.mktemp("chromium-profile")
    with sync_playwright() as pw:
        context = pw.chromium.launch_persistent_context(
            str(profile), executable_path=str(CHROMIUM), headless=True,
            args=CHROMIUM_FLAGS, viewport={"width": 1000, "height": 1400})
        yield context
        context.close()
    shutil.rmtree(profile, ignore_errors=True)
