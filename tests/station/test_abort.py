"""Abort in the middle of a capture: SIGINT sent to a real `nightbench run` subprocess.

The run is paced (`--realtime 20`) so the test can catch it mid-capture: it polls the run folder
for the long capture's `.partial` stack file (short real sleeps are unavoidable here, the run is a
separate process), then sends SIGINT. Afterwards the run folder must show the bench left safe:
the last blackbody setpoint command is the station's safe setpoint, the stage parked, the frames
finished before the abort on disk with the checksums the manifest recorded, and the manifest
saying aborted because of the signal.
"""

from __future__ import annotations

import hashlib
import json
import signal
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
import tifffile
import yaml

from station.cli import exitcodes
from station.inputs.config import BUILTIN_DIR

SIM_STATION = yaml.safe_load((BUILTIN_DIR / "sim_station.yaml").read_text(encoding="utf-8"))
SAFE_C = float(SIM_STATION["instruments"]["blackbody"]["safe_c"])
PARK = {axis: float(spec["park"])
        for axis, spec in SIM_STATION["instruments"]["stage"]["axes"].items()}
FIRST_FRAMES = 3

RECIPE = f"""\
recipe: e2e-abort
description: a short capture, then a long one that the test interrupts
steps:
  - target: open
  - blackbody: {{mode: difference, value: 1.0, tolerance: 1.5, hold: 1, timeout: 60}}
  - capture: {{name: first, frames: {FIRST_FRAMES}, keep: both}}
  - move: {{az: 35.0, el: -25.0}}
  - capture: {{name: long, frames: 5000, keep: stack}}
"""


def start_run(tmp_path: Path, speed: float = 20.0) -> tuple[subprocess.Popen, Path]:
    recipe = tmp_path / "abort.yaml"
    recipe.write_text(RECIPE, encoding="utf-8")
    runs = tmp_path / "runs"
    proc = subprocess.Popen(
        [sys.executable, "-m", "station", "run", str(recipe), "--runs", str(runs), "--plain",
         "--realtime", str(speed)], cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
        text=True)
    return proc, runs


def wait_for_long_capture(proc: subprocess.Popen, runs: Path, timeout_s: float = 60.0) -> Path:
    """Poll (real time: a separate process) until the long capture has written a frame."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            pytest.fail(f"run ended early ({proc.returncode}): {proc.stdout.read()}")
        partials = list(runs.glob("*/frames/long*.partial"))
        if partials and partials[0].stat().st_size > 640 * 512 * 2:
            return partials[0].parents[1]
        time.sleep(0.05)
    proc.kill()
    pytest.fail("the long capture never started")


def finish(proc: subprocess.Popen) -> str:
    try:
        out, _ = proc.communicate(timeout=60)
    except subprocess.TimeoutExpired:
        proc.kill()
        pytest.fail("run did not end after SIGINT")
    return out


def load_events(folder: Path) -> list[dict]:
    return [json.loads(line) for line in (folder / "events.jsonl").read_text().splitlines()]


def check_left_safe(folder: Path, output: str, returncode: int) -> list[dict]:
    assert returncode == exitcodes.ABORTED, output
    manifest = json.loads((folder / "manifest.json").read_text())
    assert manifest["state"] == "aborted"
    assert "SIGINT" in manifest["cause"]
    events = load_events(folder)
    states = [(e["source"], e["dest"]) for e in events if e["type"] == "state"]
    assert states[-2:] == [("running", "safing"), ("safing", "aborted")]
    safing = {e["type"]: e for e in events if e["type"].startswith("safing.")}
    assert safing["safing.blackbody"]["ok"] is True
    assert safing["safing.stage"]["ok"] is True
    # parked: the station file's park positions, to the drivers' 4-decimal command resolution
    for axis, park in PARK.items():
        assert abs(safing["safing.stage"]["positions"][axis] - park) <= 1e-4
    # the last blackbody setpoint command sent is the safe setpoint, in absolute mode (C)
    setpoints = [e["command"] for e in events if e["type"] == "io"
                 and e["instrument"] == "blackbody"
                 and e["command"].split()[0] in ("SOUR:TEMP", "SOUR:DIFF")]
    last = setpoints[-1].split()
    assert last[0] == "SOUR:TEMP" and abs(float(last[1]) - SAFE_C) <= 1e-4
    # the capture finished before the abort is on disk, whole, with the manifest's checksums
    meta = json.loads((folder / "frames" / "first.json").read_text())
    assert meta["count"] == FIRST_FRAMES
    stack = tifffile.imread(folder / "frames" / meta["files"]["stack"]["file"])
    assert stack.shape[0] == FIRST_FRAMES
    for rel in ("frames/first.json", "frames/" + meta["files"]["stack"]["file"],
                "frames/" + meta["files"]["average"]["file"]):
        digest = hashlib.sha256((folder / rel).read_bytes()).hexdigest()  # FIPS 180-4
        assert manifest["files"][rel]["sha256"] == digest
    # the interrupted capture was never renamed to a finished one
    assert not (folder / "frames" / "long.json").exists()
    return events


@pytest.fixture(scope="module")
def launched(tmp_path_factory: pytest.TempPathFactory) -> Iterator[dict[str, tuple[subprocess.Popen, Path]]]:
    runs = {"one": start_run(tmp_path_factory.mktemp("one"))}
    yield runs
    for proc, _ in runs.values():
        if proc.poll() is None:
            proc.kill()
            proc.communicate()


def test_sigint_mid_capture_leaves_bench_safe(launched) -> None:
    proc, runs = launched["one"]
    folder = wait_for_long_capture(proc, runs)
    proc.send_signal(signal.SIGINT)
    output = finish(proc)
    check_left_safe(folder, output, proc.returncode)

# The second Ctrl-C during safing: tests/station/test_second_sigint.py (in process, deterministic).
