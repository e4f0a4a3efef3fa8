"""Safety at the point of use: what the operator is shown and asked before a real bench moves,
and told after a run that did not complete.

Why here and not in the engine: the engine leaves the bench safe on every way out whoever starts
it; what a person standing at the bench needs to read and answer belongs to the command line.

Before a run on a station that is not simulated:

- a station without a UUT file is refused (the run would be filed under the demo camera);
- the planned maximum source temperature, the stage travel envelope, the hot-surface and
  moving-parts cautions and the lab-rules reminder are printed;
- the operator confirms at the terminal, or `--yes` says the start is unattended (recorded in the
  manifest); with neither (stdin not a terminal) the run is refused.

After an abort or a fault: what safing did (setpoint sent, stage parked), from the run's event log,
and that the source may still be hot.
"""

from __future__ import annotations

import getpass
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, TextIO

from station.cli import exitcodes

UNREACHABLE_MARKS = ("could not open the bench", "does not answer")
"""Causes that mean an instrument did not answer (exit code INSTRUMENT, as `bench` gives)."""


@dataclass(frozen=True)
class Envelope:
    """What a plan will do to the bench at most."""

    max_absolute_c: float | None
    max_difference_k: float | None
    axes: dict[str, tuple[float, float, str]]  # axis -> (lowest, highest, unit), park included


def plan_envelope(plan_steps: Sequence[Any], station: Any) -> Envelope:
    """Highest source setpoints (absolute C, difference K) and the stage travel of a plan."""
    absolute = [float(s.setpoint) for s in plan_steps
                if s.kind == "blackbody" and s.mode == "absolute"]
    difference = [float(s.setpoint) for s in plan_steps
                  if s.kind == "blackbody" and s.mode == "difference"]
    axes: dict[str, tuple[float, float, str]] = {}
    for axis, limits in station.axes.items():
        values = [float(limits.park)] + [float(s.position[axis]) for s in plan_steps
                                         if s.kind == "move" and axis in s.position]
        axes[axis] = (min(values), max(values), limits.unit)
    return Envelope(max(absolute) if absolute else None,
                    max(difference) if difference else None, axes)


def caution_lines(inputs: Any) -> list[str]:
    """The text shown before a run on a real bench."""
    station = inputs.station
    env = plan_envelope(inputs.plan.steps, station)
    safe_c = float(station.instruments["blackbody"].settings.get("safe_c", 23.0)) \
        if "blackbody" in station.instruments else 23.0
    lines = [f"REAL BENCH: {station.name} ({station.path})",
             f"  recipe {inputs.plan.recipe}, {len(inputs.plan.steps)} steps, UUT "
             f"{inputs.uut.serial} ({inputs.uut_path})"]
    hottest: list[str] = []
    if env.max_absolute_c is not None:
        hottest.append(f"{env.max_absolute_c:.1f} C (absolute setpoint)")
    if env.max_difference_k is not None:
        hottest.append(f"{env.max_difference_k:+.1f} K above the reference plate (about "
                       f"{safe_c + env.max_difference_k:.0f} C with the plate at {safe_c:.0f} C)")
    lines.append("  planned maximum source temperature: "
                 + (" and ".join(hottest) if hottest else "no setpoint in this recipe"))
    travel = ", ".join(f"{axis} {lo:+.3f} to {hi:+.3f} {unit}"
                       for axis, (lo, hi, unit) in env.axes.items())
    lines.append(f"  stage travel envelope (park included): {travel or 'no stage axes'}")
    lines += [
        "CAUTION hot surface: the blackbody emitter and its surround get hot and stay hot after "
        "the run; do not touch them.",
        "CAUTION moving parts: the stage and the target wheel move without warning; keep hands, "
        "cables and people clear of their travel.",
        "Follow your lab's rules for this bench (who may run it, unattended operation, what to "
        "check before leaving it).",
    ]
    return lines


def confirm_start(print_line: Callable[[str], None], *, assume_yes: bool, stdin: TextIO,
                  ask: Callable[[str], str] = input) -> str | None:
    """How the start was confirmed (for the manifest), or None when it must be refused."""
    if assume_yes:
        return f"--yes: unattended start by {_user()}"
    if not stdin.isatty():
        print_line("refused: nobody can confirm the start (standard input is not a terminal); "
                   "pass --yes for an unattended start")
        return None
    try:
        answer = ask("Start the run on this bench? Type 'yes' to start: ")
    except EOFError:
        answer = ""
    if answer.strip().lower() != "yes":
        print_line("not started: the operator did not confirm")
        return None
    return f"confirmed at the terminal by {_user()}"


def _user() -> str:
    try:
        return getpass.getuser()
    except (KeyError, OSError):
        return "an unknown user"


def safing_lines(events: Sequence[Mapping[str, Any]], station: Any = None, *,
                 simulated: bool | None = None) -> list[str]:
    """What the last safing did, from the event log, and the hot-source reminder (not for a
    simulated station). `station` gives the axes' units; without it positions have none."""
    last: dict[str, Mapping[str, Any]] = {}
    for event in events:
        if str(event.get("type", "")).startswith("safing."):
            last[str(event["type"])] = event
    units = {a: lim.unit for a, lim in station.axes.items()} if station is not None else {}
    if simulated is None:
        simulated = bool(station is not None and station.simulated)
    lines = []
    bb = last.get("safing.blackbody")
    if bb is None:
        lines.append("blackbody: safing did not reach it (the bench was never opened)")
    elif bb.get("ok"):
        setpoint = bb.get("setpoint_c")
        lines.append("blackbody: safe setpoint sent" + (
            f", the source reports a setpoint of {float(setpoint):.2f} C" if setpoint is not None
            else ""))
    else:
        lines.append(f"blackbody: NOT SAFED ({bb.get('error')}): set it to its safe setpoint "
                     "by hand")
    stage = last.get("safing.stage")
    if stage is None:
        lines.append("stage: safing did not reach it")
    elif stage.get("ok"):
        positions = stage.get("positions") or {}
        lines.append("stage: stopped and parked at " + ", ".join(
            f"{a} {float(v):+.3f} {units.get(a, '')}".rstrip() for a, v in positions.items()))
    else:
        lines.append(f"stage: NOT PARKED ({stage.get('error')}): park it by hand")
    if not simulated:
        lines.append("The source may still be hot: let it cool before touching it or the "
                     "target wheel.")
    return lines


def safing_incomplete_block(events: Sequence[Mapping[str, Any]]) -> list[str]:
    """The loud block shown when the last safing left an instrument live: which instrument,
    why, and what the operator must do by hand. Empty when the last safing (if any) was
    complete. Read from the event log, so `run` and `resume` show the same."""
    last = None
    for event in events:
        kind = str(event.get("type", ""))
        if kind == "safing.incomplete":
            last = event
        elif kind == "safing.blackbody":  # a later safing supersedes an earlier shortfall
            last = None
    if last is None:
        return []
    bar = "=" * 24
    lines = [f"{bar} SAFING INCOMPLETE {bar}",
             "The bench was NOT left safe. Make it safe by hand before anything else:"]
    for item in last.get("shortfalls") or []:
        lines.append(f"  {item.get('instrument')}: {item.get('problem')}")
        lines.append(f"    by hand: {item.get('by_hand')}")
    lines += ["Then check every instrument at the bench before starting another run.",
              "=" * (2 * len(bar) + 19)]
    return lines


def run_exit_code(state: str, cause: str) -> int:
    """Exit code of `run`: safing that left an instrument live gives SAFING_FAILED (it outranks
    every other outcome: a person must act); an instrument that did not answer gives
    INSTRUMENT, as in `bench` (also when it made safing fail at preflight, before anything
    moved: the console still shows what could not be safed)."""
    from station.engine.safing import INCOMPLETE_MARK

    unreachable = state == "faulted" and any(mark in (cause or "") for mark in UNREACHABLE_MARKS)
    if unreachable and (cause or "").startswith("preflight:"):
        return exitcodes.INSTRUMENT  # nothing was moved: the bench is as it was before the run
    if state != "complete" and INCOMPLETE_MARK in (cause or ""):
        return exitcodes.SAFING_FAILED
    if unreachable:
        return exitcodes.INSTRUMENT
    return exitcodes.BY_STATE.get(state, exitcodes.FAULTED)


def read_run_events(run_path: Path) -> list[dict[str, Any]]:
    """The run's events (tolerant of a torn last line)."""
    from station.record.events import read_events

    path = Path(run_path) / "events.jsonl"
    return read_events(path) if path.is_file() else []
