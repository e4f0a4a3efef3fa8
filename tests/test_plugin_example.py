"""The worked plug-in example of DEVELOPERS.md: a separate package adds a stage driver.

tests/plugins/linear_stage_pkg is installed (editable, offline: no build isolation, no
dependencies), found through the `nightbench.drivers` entry point, listed by `nightbench
drivers`, and drives the simulated stage through a recipe in a real `nightbench run`.
"""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from importlib.metadata import PackageNotFoundError, distribution
from pathlib import Path

import pytest

HERE = Path(__file__).parent / "plugins"
PKG = HERE / "linear_stage_pkg"
# Simulated axis x of glide_station.yaml
VELOCITY, ACCELERATION = 20.0, 50.0


def trapezoid_s(distance: float) -> float:
    """Trapezoidal move time d/v + v/a (kinematics; 2 sqrt(d/a) below full speed)."""
    d = abs(distance)
    v, a = VELOCITY, ACCELERATION
    return d / v + v / a if d >= v * v / a else 2.0 * math.sqrt(d / a)


def run(*args: str) -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "COLUMNS": "200"}
    return subprocess.run(list(args), capture_output=True, text=True, env=env, timeout=300)


@pytest.fixture(scope="module")
def installed() -> None:
    try:
        distribution("glide-linear-stage")
    except PackageNotFoundError:
        done = run(sys.executable, "-m", "pip", "install", "--no-deps", "--no-build-isolation",
                   "-q", "-e", str(PKG))
        assert done.returncode == 0, done.stderr


def test_nightbench_drivers_lists_the_plugin(installed: None) -> None:
    done = run(sys.executable, "-m", "station", "drivers")
    assert done.returncode == 0, done.stderr
    row = next(line for line in done.stdout.splitlines() if "glide-linear-stage" in line)
    cells = [c.strip() for c in row.strip("│┃ ").split("│")]
    assert cells[:3] == ["glide-linear-stage", "stage", "glide-linear-stage"]
    assert "axes" in cells[3]


def test_the_plugin_drives_the_simulated_stage_through_a_recipe(installed: None,
                                                                tmp_path: Path) -> None:
    done = run(sys.executable, "-m", "station", "run", str(HERE / "glide_recipe.yaml"),
               "--station", str(HERE / "glide_station.yaml"), "--runs", str(tmp_path), "--plain")
    assert done.returncode == 0, done.stdout + done.stderr
    (folder,) = [p for p in tmp_path.iterdir() if p.is_dir()]  # the history file lies beside
    events = [json.loads(x) for x in (folder / "events.jsonl").read_text().splitlines()]
    moves = [e for e in events if e["type"] == "step.done" and e["kind"] == "move"]
    positions = [m["result"]["positions"]["x"] for m in moves]
    assert positions == pytest.approx([-40.0, 0.0, 45.0, 0.0], abs=1e-3)   # mm
    start = {e["step"]: e["t"] for e in events if e["type"] == "step.start"}
    took = [m["t"] - start[m["step"]] for m in moves]
    expected = [trapezoid_s(d) for d in (-40.0, 40.0, 45.0, -45.0)]
    assert took == pytest.approx(expected, abs=0.25)  # within the step's polling interval
    sent = {e["command"] for e in events if e["type"] == "io" and e["instrument"] == "stage"}
    assert {"MOVE x -40.000", "MOVE x 45.000"} <= sent   # the plug-in's own formatting


def test_the_plugin_passes_the_contract(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.syspath_prepend(str(PKG))
    from glide_linear_stage import GlideLinearStage

    from drivers.clock import SimClock
    from drivers.errors import LimitError
    from drivers.testkit import run_contract
    from drivers.transport import open_transport
    from simulators.bench import SimBench
    from simulators.servers import start_bench_servers

    clock = SimClock()
    axis = {"min": -60.0, "max": 60.0, "hard_min": -70.0, "hard_max": 70.0,
            "velocity": VELOCITY, "acceleration": ACCELERATION, "start": 0.0}
    bench = SimBench.from_mapping({"stage": {"axes": {"x": axis}}}, clock, seed=4)
    settings = {"axes": {"x": {"min": -50.0, "max": 50.0, "park": 0.0, "unit": "mm"}}}
    with start_bench_servers(bench) as servers, \
            open_transport(servers.resource("stage"), instrument="stage", clock=clock) as link:
        stage = GlideLinearStage(link, name="stage", settings=settings)
        report = run_contract(stage, clock)
        with pytest.raises(LimitError, match="55.0 mm outside -50.0..50.0 mm"):
            stage.move_to({"x": 55.0})
    report.raise_if_failed()
    assert GlideLinearStage.validate_settings({"axes": {"x": {"min": 5, "max": -5}}}) == [
        "axes.x.max: -5 must be above min 5"]
