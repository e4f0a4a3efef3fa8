"""Soak: a long scan in simulated time under a few hundred seeded random faults of every kind.

Run: `python3 tests/bench/bench_soak.py [--seed N] [--max-sessions N]`. Not collected by pytest.

Every fault kind the simulators know is given a probability per check, so the same seed gives the
same failures. When a session ends faulted, the run is resumed in process (same fault plan, its
generator carrying on) until it completes or the session cap is reached. At the end it prints how
many faults fired, how many sessions they faulted (each resumed), how many were ridden out in
place (retry, reconnect, re-grab), and checks the frames on disk against the plan: every planned
capture present once, with exactly its planned frame count, counters strictly increasing (no frame
lost or stored twice), and the stack's page count equal to the metadata's count.
"""

from __future__ import annotations

import argparse
import io
import logging
import json
import sys
import tempfile
import time
from collections import Counter
from pathlib import Path

import tifffile
from rich.console import Console

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))  # run as a script from anywhere
from tests.station.fast_bench import fast_station_yaml  # noqa: E402

from drivers.clock import SimClock
from simulators.faults import FaultPlan
from station.cli.console import RunConsole
from station.record.events import read_events
from station.record.manifest import Manifest
from station.engine.resume import resume_run
from station.engine.runner import execute, load_inputs, new_run_folder, plan_summary
from station.record.verify import verify_run


STATION = fast_station_yaml("Simulated bench for the soak", timeout_s=0.2)

# 2 differences x 9 az x 7 el = 126 poses, 3 frames each: 378 planned frames.
RECIPE = """\
recipe: soak-scan
description: Field scan at two blackbody differences, for the fault soak
steps:
  - target: pinhole_grid
  - sweep:
      over: difference
      values: [5.0, 10.0]
      steps:
        - blackbody: {mode: difference, value: "${difference}", tolerance: 0.05, hold: 10,
                      timeout: 300}
        - scan:
            axes:
              az: {from: -20, to: 20, step: 5}
              el: {from: -15, to: 15, step: 5}
            order: serpentine
            steps:
              - capture: {name: field, frames: 3, keep: both}
  - move: {az: 0.0, el: 0.0}
"""

# Probability per check. Wire faults are checked once per command to that instrument, physics
# faults once per command too, grabber faults once per frame; tuned for a few hundred in all.
PROBABILITIES = {
    "blackbody": {"timeout": 0.002, "garbled": 0.003, "truncated": 0.002, "disconnect": 0.002,
                  "restart": 0.0004, "unsettled": 0.0003, "drift": 0.0003},
    "wheel": {"timeout": 0.01, "garbled": 0.01, "truncated": 0.01, "disconnect": 0.01,
              "restart": 0.002},
    "stage": {"timeout": 0.002, "garbled": 0.003, "truncated": 0.002, "disconnect": 0.002,
              "restart": 0.0004, "stall": 0.0006, "hard_limit": 0.0004},
    "grabber": {"drop": 0.04, "repeat": 0.04, "short": 0.04},
}

RECOVERY_EVENTS = ("transport.retry", "transport.reconnect", "frame.gap", "frame.rejected",
                   "capture.discarded")


def fault_plan(seed: int) -> FaultPlan:
    plan = FaultPlan(seed=seed)
    for instrument, kinds in PROBABILITIES.items():
        for kind, p in kinds.items():
            params = {"rate_k_per_s": 0.05} if kind == "drift" else {}
            plan.add(instrument, kind, probability=p, params=params)
    return plan


def quiet_console(clock: SimClock) -> RunConsole:
    return RunConsole(Console(file=io.StringIO()), plain=True, clock=clock)


def check_frames(run: Path, inputs) -> list[str]:
    """Planned captures against frames on disk: one each, exact counts, no repeats, no gaps
    between what the metadata lists and what the stack holds."""
    problems = []
    planned = {s.name: s.frames for s in inputs.plan.steps
               if s.kind == "capture"}
    found = {}
    for meta_path in (run / "frames").glob("*.json"):
        meta = json.loads(meta_path.read_text(encoding="utf-8"))
        found[meta["name"]] = meta
    for name, count in planned.items():
        meta = found.get(name)
        if meta is None:
            problems.append(f"{name}: missing")
            continue
        counters = meta["counters"]
        if meta["count"] != count or len(counters) != count:
            problems.append(f"{name}: {meta['count']} frames, planned {count}")
        if any(b <= a for a, b in zip(counters, counters[1:])):
            problems.append(f"{name}: counters not strictly increasing {counters}")
        stack = run / "frames" / Path(meta["files"]["stack"]["file"]).name
        with tifffile.TiffFile(stack) as tf:
            if len(tf.pages) != count:
                problems.append(f"{name}: stack holds {len(tf.pages)} pages, planned {count}")
    extra = set(found) - set(planned)
    if extra:
        problems.append(f"captures not in the plan: {sorted(extra)}")
    return problems


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seed", type=int, default=2026)
    parser.add_argument("--max-sessions", type=int, default=80)
    args = parser.parse_args(argv)
    logging.getLogger("nightbench").setLevel(logging.ERROR)  # every retry is in events.jsonl
    base = Path(tempfile.mkdtemp(prefix="nightbench-soak-"))
    (base / "station.yaml").write_text(STATION, encoding="utf-8")
    (base / "recipe.yaml").write_text(RECIPE, encoding="utf-8")
    inputs = load_inputs(base / "recipe.yaml", station_path=base / "station.yaml", uut_path=None,
                         overrides={})
    plan = fault_plan(args.seed)
    wall = time.monotonic()
    clock = SimClock()
    run = new_run_folder(inputs, base / "runs", clock)
    manifest = Manifest.begin(clock, inputs=run.inputs, plan=plan_summary(inputs, 1))
    manifest.write(run.path)
    live = quiet_console(clock)
    outcome = execute(inputs, run, clock, live, seed=1, fault_plan=plan, manifest=manifest)
    run.close()
    manifest.close(run.path, state=outcome.state, cause=outcome.cause, clock=clock)
    state, cause = outcome.state, outcome.cause
    causes: list[str] = []
    sessions = 1
    while state != "complete" and sessions < args.max_sessions:
        causes.append(cause)
        now = max(e["t"] for e in read_events(run.path / "events.jsonl")[-5:]) + 1.0
        resume_clock = SimClock(start=now)
        state, cause, _ = resume_run(run.path, console=quiet_console(resume_clock),
                                     clock=resume_clock, fault_plan=plan)
        sessions += 1
    events = read_events(run.path / "events.jsonl")
    recoveries = Counter(e["type"] for e in events if e["type"] in RECOVERY_EVENTS)
    fired = plan.counts()
    total_fired = sum(fired.values())
    faulted = len(causes)
    frame_problems = check_frames(run.path, inputs)
    report = verify_run(run.path)
    aside = list((run.path / "frames" / "abandoned").glob("*")) \
        if (run.path / "frames" / "abandoned").is_dir() else []
    print(f"soak seed {args.seed}: {len(inputs.plan.steps)} steps, {inputs.estimate.frames} "
          f"planned frames, final state {state} after {sessions} session(s), "
          f"{time.monotonic() - wall:.0f} s wall, simulated {clock_span(events) / 3600:.2f} h")
    print(f"faults fired: {total_fired}")
    for (instrument, kind), n in sorted(fired.items()):
        print(f"  {instrument:9s} {kind:11s} {n}")
    print(f"faulted the run (then resumed): {faulted}")
    print(f"ridden out in place: {total_fired - faulted} "
          f"(events: {', '.join(f'{k} {v}' for k, v in sorted(recoveries.items()))})")
    print("causes of the faulted sessions:")
    for c in Counter(_short(c) for c in causes).most_common():
        print(f"  {c[1]} x {c[0]}")
    print(f"captures set aside: {len(aside)}")
    print(f"frames on disk against the plan: "
          f"{'OK, none lost or duplicated' if not frame_problems else frame_problems}")
    print(f"verify: {'OK' if report.ok else report.format()}")
    print(f"run folder: {run.path}")
    return 0 if state == "complete" and not frame_problems and report.ok else 1


def clock_span(events: list[dict]) -> float:
    return events[-1]["t"] - events[0]["t"] if events else 0.0


def _short(cause: str) -> str:
    return cause.split(";")[0][:110]


if __name__ == "__main__":
    sys.exit(main())
