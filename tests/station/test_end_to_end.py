"""End to end: a three-difference sweep through the real command line on the simulated bench.

One subprocess run (`python -m station run FILE --runs DIR --plain`) in simulated time, then every
file of its run folder is read back: manifest checksums against the files (SHA-256, FIPS 180-4 via
hashlib), frame counts against the recipe, frame times against the UUT frame rate, blackbody
readings against the recipe's tolerance and against the first-order-lag closed form of the
simulated source, the state changes in the event log, and `nightbench verify`.
"""

from __future__ import annotations

import hashlib
import json
import math
import subprocess
import sys
from pathlib import Path

import pytest
import tifffile
import yaml

from station.inputs.config import BUILTIN_DIR
from station.record.live import is_live_view
from station.record.verify import DERIVED_AFTER_CLOSE

SIM_STATION = yaml.safe_load((BUILTIN_DIR / "sim_station.yaml").read_text(encoding="utf-8"))
SIM_BB = SIM_STATION["simulation"]["bench"]["blackbody"]
TAU_S = float(SIM_BB["time_constant_s"])
NOISE_K = float(SIM_BB["noise_mk"]) / 1000.0
DRIFT_K_PER_S = float(SIM_BB["reference_drift_k_per_h"]) / 3600.0
FRAME_RATE_HZ = float(yaml.safe_load((BUILTIN_DIR / "demo_uut.yaml").read_text())["frame_rate_hz"])

DIFFERENCES = (1.0, 2.0, 3.0)
FRAMES = 5
TOLERANCE = 0.02
HOLD_S = 5.0
# temperature - reference is the difference of two readbacks, each with Gaussian noise of
# NOISE_K: 4 sigma of the difference (sqrt(2) NOISE_K) bounds it with probability > 0.9999.
READBACK_BAND = 4.0 * math.sqrt(2.0) * NOISE_K
READING_RESOLUTION = 1e-4  # readings are printed with 0.1 mK resolution by the simulator

RECIPE = f"""\
recipe: e2e-three-differences
description: flat fields at three blackbody differences (end-to-end test)
parameters:
  differences: {list(DIFFERENCES)}
  frames: {FRAMES}
steps:
  - target: open
  - move: {{az: 0.0, el: 0.0}}
  - sweep:
      over: difference
      values: "${{differences}}"
      steps:
        - blackbody: {{mode: difference, value: "${{difference}}", tolerance: {TOLERANCE}, hold: {HOLD_S}}}
        - capture: {{name: flat, frames: "${{frames}}", keep: both}}
"""


def nightbench(*args: str, cwd: Path, timeout: float = 120.0) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "station", *args], cwd=cwd, text=True,
                          capture_output=True, timeout=timeout)


@pytest.fixture(scope="module")
def run_folder(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("e2e")
    recipe = root / "three.yaml"
    recipe.write_text(RECIPE, encoding="utf-8")
    done = nightbench("run", str(recipe), "--runs", str(root / "runs"), "--plain", cwd=root)
    assert done.returncode == 0, done.stdout + done.stderr
    folders = [p for p in (root / "runs").iterdir() if p.is_dir()]  # + the history file
    assert len(folders) == 1
    return folders[0]


def load_events(folder: Path) -> list[dict]:
    return [json.loads(line) for line in (folder / "events.jsonl").read_text().splitlines()]


def captures(folder: Path) -> list[dict]:
    metas = [json.loads(p.read_text()) for p in sorted((folder / "frames").glob("*.json"))]
    return sorted(metas, key=lambda m: m["start_t"])


def test_manifest_complete_and_every_checksum_matches(run_folder: Path) -> None:
    manifest = json.loads((run_folder / "manifest.json").read_text())
    assert manifest["state"] == "complete"
    files = manifest["files"]
    on_disk = {p.relative_to(run_folder).as_posix() for p in run_folder.rglob("*")
               if p.is_file() and p.name != "manifest.json"
               and p.name not in DERIVED_AFTER_CLOSE  # the report, written from the record
               and not is_live_view(p.relative_to(run_folder).as_posix())}  # view for monitors
    assert set(files) == on_disk
    for rel, entry in files.items():
        data = (run_folder / rel).read_bytes()
        # SHA-256 recomputed with hashlib (FIPS 180-4), independently of station.record.atomic
        assert hashlib.sha256(data).hexdigest() == entry["sha256"], rel
        assert len(data) == entry["bytes"], rel


def test_frame_counts_and_times_match_recipe_and_frame_rate(run_folder: Path) -> None:
    metas = captures(run_folder)
    assert [m["name"] for m in metas] == [f"flat[difference={d:g}]" for d in DIFFERENCES]
    for m in metas:
        assert m["count"] == m["expected_count"] == FRAMES
        assert len(m["counters"]) == len(m["timestamps"]) == FRAMES
        # consecutive counters: no frame dropped or repeated
        assert m["counters"] == list(range(m["counters"][0], m["counters"][0] + FRAMES))
        stack = tifffile.imread(run_folder / "frames" / m["files"]["stack"]["file"])
        assert stack.shape == (FRAMES, 512, 640) and stack.dtype.name == "uint16"
        average = tifffile.imread(run_folder / "frames" / m["files"]["average"]["file"])
        assert average.dtype.name == "float32"
        # the average is the mean of the stack (float32 rounding: 2^-24 relative)
        assert abs(float(average.mean()) - float(stack.mean(dtype="float64"))) <= \
            2.0 ** -20 * float(stack.max())
        # frame period = 1 / frame rate (UUT data sheet), to clock float resolution
        periods = [b - a for a, b in zip(m["timestamps"], m["timestamps"][1:])]
        assert all(abs(p - 1.0 / FRAME_RATE_HZ) < 1e-6 for p in periods)


def test_blackbody_readings_within_step_tolerance(run_folder: Path) -> None:
    for setpoint, m in zip(DIFFERENCES, captures(run_folder)):
        for key in ("readings_start", "readings_end"):
            bb = m["extra"][key]["blackbody"]
            assert bb["mode"] == "difference" and bb["setpoint"] == pytest.approx(setpoint)
            difference = bb["temperature_c"] - bb["reference_c"]
            assert abs(difference - setpoint) <= TOLERANCE + READBACK_BAND + READING_RESOLUTION


def test_blackbody_readings_follow_first_order_lag(run_folder: Path) -> None:
    """A first-order source after a step e0 at t0 is e0 exp(-(t - t0)/tau) from its setpoint
    (Newton's law of cooling; no slew limit while |e0| < slew * tau). In difference mode the
    drifting reference adds a lag of drift * tau."""
    events = load_events(run_folder)
    steps_at = [e["t"] for e in events if e["type"] == "io"
                and e["command"].startswith("SOUR:DIFF ")]
    assert len(steps_at) == len(DIFFERENCES)
    previous = 0.0  # the simulated source starts at the reference temperature
    for setpoint, t0, m in zip(DIFFERENCES, steps_at, captures(run_folder)):
        e0 = setpoint - previous
        assert abs(e0) < SIM_BB["slew_k_per_s"] * TAU_S
        expected = setpoint - e0 * math.exp(-(m["start_t"] - t0) / TAU_S) - DRIFT_K_PER_S * TAU_S
        bb = m["extra"]["readings_start"]["blackbody"]
        reading = bb["temperature_c"] - bb["reference_c"]
        assert abs(reading - expected) <= READBACK_BAND + READING_RESOLUTION
        previous = expected


def test_state_changes_in_order(run_folder: Path) -> None:
    states = [(e["source"], e["dest"]) for e in load_events(run_folder) if e["type"] == "state"]
    assert states == [("idle", "preflight"), ("preflight", "running"), ("running", "complete")]


def test_verify_passes(run_folder: Path) -> None:
    done = nightbench("verify", str(run_folder), cwd=run_folder.parent)
    assert done.returncode == 0, done.stdout + done.stderr
