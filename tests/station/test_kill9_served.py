"""Kill -9 a scan run on a served simulated bench, again and again, and get the uninterrupted run.

Two `nightbench simulate` processes serve two identical simulated benches (same station, same
seed), paced at 20x real time so a kill lands inside the step the test aims at. On one, a
reference run goes through uninterrupted. On the other, one run is killed with SIGKILL while the
blackbody settles; then each resume is itself killed: during a stage move, during a capture,
during the analysis; the last resume completes.

Reference for "the same": the uninterrupted run on an identical bench. The resumed run's
results/*.json must equal it to 1e-9 (same frames, same code: only float rounding may differ),
the captures must have the same names and frame counts, and `verify` must pass. Instrument state
must survive the kill (the served blackbody is still hot when the first resume starts).
Kill moments are drawn from a seeded generator (reproducible), inside each aimed step.
"""

from __future__ import annotations

import json
import os
import random
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import pytest
import yaml

from simulators.served import ServedClock
from station.record.verify import verify_run

REPO = Path(__file__).resolve().parents[2]
TRUTH = REPO / "station" / "data" / "demo_camera_truth.yaml"
SAME = 1e-9
DEADLINE_S = 120.0
SPEED = "20"

STATION = (REPO / "station" / "data" / "sim_station.yaml").read_text(encoding="utf-8").replace(
    "camera_truth: demo_camera_truth.yaml", f"camera_truth: {TRUTH}").replace(
    "time_constant_s: 60.0, slew_k_per_s: 0.1", "time_constant_s: 5.0, slew_k_per_s: 5.0")

RECIPE = """\
recipe: served-kill-scan
description: a 5 x 5 pinhole scan, killed and resumed
steps:
  - target: pinhole
  - blackbody: {mode: difference, value: 30.0, tolerance: 0.02, hold: 10}
  - scan:
      axes:
        az: {from: -11.0, to: 11.0, step: 5.5}
        el: {from: -8.5, to: 8.5, step: 4.25}
      order: serpentine
      steps:
        - capture: {name: spot, frames: 3, keep: average}
  - move: {az: 0.0, el: 0.0}
  - analyze: {analysis: distortion, captures: [spot], options: {mode: scan}}
"""

ENV = {**os.environ, "PYTHONUNBUFFERED": "1"}


def _serve(folder: Path) -> tuple[subprocess.Popen, Path]:
    folder.mkdir(parents=True)
    served = folder / "served.yaml"
    proc = subprocess.Popen([sys.executable, "-m", "station", "simulate", "--station",
                             str(folder.parent / "station.yaml"), "--seed", "3", "--out",
                             str(served), "--realtime", SPEED], cwd=REPO, env=ENV,
                            stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    return proc, served


def _wait_for(condition: Callable[[], bool], what: str, limit_s: float = 60.0) -> None:
    end = time.monotonic() + limit_s
    while not condition():  # real time on purpose: another process is doing the work
        if time.monotonic() > end:
            pytest.fail(f"timed out waiting for {what}")
        time.sleep(0.002)


def _events(run: Path) -> list[dict]:
    try:
        lines = (run / "events.jsonl").read_text(encoding="utf-8").splitlines()
    except OSError:
        return []
    out = []
    for line in lines:
        try:
            out.append(json.loads(line))
        except ValueError:
            pass  # a line being written
    return out


def _nth_start_since_resume(kind_prefix: str, n: int, resumes: int) -> Callable[[Path], bool]:
    """The n-th `step.start` of a step whose kind starts with `kind_prefix`, in the session
    after the `resumes`-th resume.start."""
    def seen(run: Path) -> bool:
        count, session = 0, 0
        for e in _events(run):
            if e.get("type") == "resume.start":
                session += 1
            elif e.get("type") == "step.start" and session == resumes and \
                    str(e.get("kind", "")).startswith(kind_prefix):
                count += 1
        return count >= n
    return seen


def _capturing_since_resume(resumes: int) -> Callable[[Path], bool]:
    """A capture is being written (its partial frame log exists) in the given session."""
    def seen(run: Path) -> bool:
        return _nth_start_since_resume("capture", 1, resumes)(run) and \
            any((run / "frames").glob("*.frames.jsonl.partial"))
    return seen


def _kill_when(proc: subprocess.Popen, run_of: Callable[[], Path | None],
               condition: Callable[[Path], bool], delay_s: float, what: str) -> Path:
    end = time.monotonic() + DEADLINE_S
    while True:
        run = run_of()
        if run is not None and condition(run):
            break
        if proc.poll() is not None:
            pytest.fail(f"{what}: the process ended (rc {proc.returncode}) before the kill "
                        f"point: {proc.stdout.read()[-800:] if proc.stdout else ''}")
        if time.monotonic() > end:
            pytest.fail(f"{what}: kill point never reached")
        time.sleep(0.001)
    time.sleep(delay_s)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=10)
    return run


def _numbers_equal(a, b, path: str = "") -> list[str]:
    if isinstance(a, dict) and isinstance(b, dict):
        if set(a) != set(b):
            return [f"{path}: keys {sorted(set(a) ^ set(b))}"]
        return [d for k in a for d in _numbers_equal(a[k], b[k], f"{path}.{k}")]
    if isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            return [f"{path}: {len(a)} vs {len(b)} items"]
        return [d for i, (x, y) in enumerate(zip(a, b)) for d in _numbers_equal(x, y, f"{path}[{i}]")]
    if isinstance(a, (int, float)) and isinstance(b, (int, float)) and not isinstance(a, bool):
        scale = max(1.0, abs(a), abs(b))
        return [] if abs(a - b) <= SAME * scale else [f"{path}: {a!r} vs {b!r}"]
    return [] if a == b else [f"{path}: {a!r} vs {b!r}"]


def _captures(run: Path) -> dict[str, int]:
    out = {}
    for meta in (run / "frames").glob("*.json"):
        data = json.loads(meta.read_text(encoding="utf-8"))
        out[meta.name] = data["count"]
    return out


def test_killed_and_resumed_scan_equals_the_uninterrupted_run(tmp_path: Path) -> None:
    (tmp_path / "station.yaml").write_text(STATION, encoding="utf-8")
    (tmp_path / "recipe.yaml").write_text(RECIPE, encoding="utf-8")
    rng = random.Random(14)
    servers: list[subprocess.Popen] = []
    try:
        ref_server, ref_station = _serve(tmp_path / "bench-ref")
        victim_server, victim_station = _serve(tmp_path / "bench-victim")
        servers += [ref_server, victim_server]
        _wait_for(lambda: ref_station.exists() and victim_station.exists(), "the served benches")

        def run_cmd(station: Path, runs: Path) -> list[str]:
            return [sys.executable, "-m", "station", "run", str(tmp_path / "recipe.yaml"),
                    "--station", str(station), "--runs", str(runs), "--plain"]

        quiet = dict(cwd=REPO, env=ENV, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
                     text=True)
        reference = subprocess.Popen(run_cmd(ref_station, tmp_path / "ref-runs"), **quiet)
        victim = subprocess.Popen(run_cmd(victim_station, tmp_path / "runs"), **quiet)

        def victim_run() -> Path | None:
            found = [p for p in (tmp_path / "runs").glob("*") if (p / "run-folder.json").exists()]
            return found[0] if found else None

        run = _kill_when(victim, victim_run, _nth_start_since_resume("blackbody", 1, 0),
                         rng.uniform(0.05, 0.5), "settling")
        served = yaml.safe_load(victim_station.read_text(encoding="utf-8"))
        control = ServedClock(served["simulation"]["served"]["control"])
        state = control.state()
        control.close()
        assert state["blackbody_c"] > 22.0 + 3.0, state  # still heating: state survived the kill
        assert json.loads((run / "manifest.json").read_text())["state"] == "running"

        resume = [sys.executable, "-m", "station", "resume", str(run), "--plain"]
        kills = [("move", _nth_start_since_resume("move", 3, 1), rng.uniform(0.0, 0.02)),
                 ("capture", _capturing_since_resume(2), rng.uniform(0.0, 0.01)),
                 ("analysis", _nth_start_since_resume("analyze", 1, 3), rng.uniform(0.0, 0.2))]
        for what, condition, delay in kills:
            proc = subprocess.Popen(resume, **quiet)
            _kill_when(proc, lambda: run, condition, delay, f"resume killed during {what}")
        final = subprocess.run(resume, **quiet, timeout=DEADLINE_S)
        assert final.returncode == 0, final.stdout[-1500:]
        assert reference.wait(timeout=DEADLINE_S) == 0, reference.stdout.read()[-1500:]
    finally:
        for proc in servers:
            proc.send_signal(signal.SIGTERM)
        for proc in servers:
            try:
                proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                proc.kill()

    (ref,) = [p for p in (tmp_path / "ref-runs").glob("*") if (p / "run-folder.json").exists()]
    report = verify_run(run)
    assert report.ok, report.format()
    events = _events(run)
    assert sum(e.get("type") == "resume.start" for e in events) == 4
    assert sum(e.get("type") == "simulation.rewound" for e in events) == 4
    assert _captures(run) == _captures(ref) and len(_captures(ref)) == 25
    ref_results = sorted(p.name for p in (ref / "results").glob("*.json"))
    assert ref_results and sorted(p.name for p in (run / "results").glob("*.json")) == ref_results
    for name in ref_results:
        a = json.loads((ref / "results" / name).read_text(encoding="utf-8"))
        b = json.loads((run / "results" / name).read_text(encoding="utf-8"))
        differences = _numbers_equal(a, b)
        assert not differences, f"{name}: {differences[:10]}"
