"""Benchmark: the built-in `overnight-soak` recipe dry-run in simulated time, in process.

Prints the wall time, the estimated real duration of the run on a real bench, their ratio and the
frames written. Goal (issue 18): a ratio of 2000x or more. The CPU time (all threads: the
simulators' servers run in this process) is printed too: on a shared machine it is the steadier
figure.

    python tests/bench/bench_overnight.py [--profile] [--one]

`--one` runs a single blackbody difference (a fifth of the run) for a quicker profile.
"""

from __future__ import annotations

import cProfile
import json
import pstats
import sys
import tempfile
import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from drivers.clock import SimClock
from station.formatting import format_duration
from station.engine.runner import execute, load_inputs, new_run_folder


class QuietConsole:
    """No display: the benchmark measures the run, not the terminal."""

    def start(self, plan_len: int, estimate_s: float) -> None: ...
    def step(self, index: int, step_id: str, description: str = "", **_: Any) -> None: ...
    def readings(self, values: Mapping[str, Any]) -> None: ...
    def log(self, level: str | int, text: str) -> None: ...
    def state(self, name: str, cause: str | None = None) -> None: ...


def run_once(root: Path, overrides: Mapping[str, Any]) -> dict[str, Any]:
    inputs = load_inputs("overnight-soak", station_path=None, uut_path=None, overrides=overrides)
    clock = SimClock()
    t_sim0 = clock.now()
    run = new_run_folder(inputs, root, clock)
    wall0, cpu0 = time.perf_counter(), time.process_time()
    outcome = execute(inputs, run, clock, QuietConsole(), seed=1)
    wall, cpu = time.perf_counter() - wall0, time.process_time() - cpu0
    run.close()
    frames = 0
    for meta in run.frames_dir.glob("*.json"):
        frames += int(json.loads(meta.read_text())["count"])
    return {"state": outcome.state, "cause": outcome.cause, "wall_s": wall, "cpu_s": cpu,
            "estimate_s": inputs.estimate.total_s, "simulated_s": clock.now() - t_sim0,
            "frames": frames, "steps": len(inputs.plan.steps)}


def main(argv: list[str]) -> int:
    overrides = {"differences": [5.0]} if "--one" in argv else {}
    with tempfile.TemporaryDirectory() as tmp:
        if "--profile" in argv:
            profiler = cProfile.Profile()
            figures = profiler.runcall(run_once, Path(tmp), overrides)
            pstats.Stats(profiler).sort_stats("cumulative").print_stats(30)
        else:
            figures = run_once(Path(tmp), overrides)
    ratio = figures["estimate_s"] / figures["wall_s"]
    print(f"overnight-soak: {figures['state']} ({figures['cause']}), {figures['steps']} steps")
    print(f"estimated real duration {format_duration(figures['estimate_s'])} "
          f"({figures['estimate_s']:.0f} s); simulated {figures['simulated_s']:.0f} s")
    print(f"wall {figures['wall_s']:.1f} s (CPU {figures['cpu_s']:.1f} s, all threads); "
          f"ratio {ratio:.0f}x (goal >= 2000x)")
    print(f"frames written {figures['frames']}")
    return 0 if figures["state"] == "complete" else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
