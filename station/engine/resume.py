"""Resume an interrupted run in its own folder: same inputs, same plan, the open steps only.

Why a separate module: resuming is the one path that must distrust what it finds. The journal
and manifest may be damaged, the station or recipe file may have been edited since the run
started, another process may still be running the run, and a half-written capture may sit in
frames/. Each of these is either refused with a message naming the file and what to do, or
handled (partials set aside under frames/abandoned/) before anything moves.

The inputs come from the run folder's own copies (inputs/), so the plan, and therefore the step
ids in the journal, are exactly those of the first session. The originals are only compared.

Example::

    state, cause, path = resume_run(Path("runs/20260101T000000Z_SN-1_grid"), console=live)
"""

from __future__ import annotations

import dataclasses
import os
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path

from drivers.clock import Clock, RealClock, SimClock
from station.record.atomic import sha256_file
from station.record.events import read_events
from station.record.journal import JournalError
from station.record.closing import close_manifest, final_state_guard, make_reserve
from station.record.manifest import Manifest, ManifestError, load_manifest
from station.record.runfolder import RunFolder, RunFolderError
from station.record.trust import Mismatch, check_recorded_files, set_aside_temporary_files
from station.engine.runner import Inputs, console_plan, execute, load_inputs
from station.engine.ports import Console
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from simulators.faults import FaultPlan

ROLES = ("station", "uut", "recipe")
BUILT_IN = "(built in)"
TAIL_BYTES = 64 * 1024


class ResumeRefused(ValueError):
    """Resuming is not safe or not possible; the message names the file and what to do.

    A ValueError so the command line reports it as an input problem (exit code 2).
    """


@dataclass(frozen=True)
class InputChange:
    """One input whose original file differs from the copy the run started with."""

    role: str
    source: str
    problem: str


def check_sources(inputs_index: Mapping[str, Mapping[str, object]]) -> list[InputChange]:
    """Compare each original input file (its recorded `source`) with the recorded SHA-256.

    Built-in inputs (no file on disk) are not compared. A missing original counts as a change:
    nobody can tell whether the station still matches.
    """
    changes: list[InputChange] = []
    for role in ROLES:
        entry = inputs_index.get(role)
        if not entry:
            continue
        source = str(entry.get("source", ""))
        if not source or source == BUILT_IN:
            continue
        path = Path(source)
        if not path.is_file():
            changes.append(InputChange(role, source, "the original file is gone"))
            continue
        if sha256_file(path) != entry.get("sha256"):
            changes.append(InputChange(role, source, "the original file was changed since "
                                       "the run started"))
    return changes


def load_run_inputs(run: RunFolder, manifest: Manifest) -> Inputs:
    """Load station, UUT and recipe from the run folder's copies, with the run's overrides.

    The station keeps its original path, so files it names relative to itself (the simulated
    camera's truth, target drawings) resolve as they did in the first session.
    """
    try:
        station_copy = run.input_path("station")
        uut_copy = run.input_path("uut")
        recipe_copy = run.input_path("recipe")
    except RunFolderError as exc:
        raise ResumeRefused(f"{exc}; inputs/inputs.json lists what was copied, and without the "
                            "copies the plan cannot be rebuilt. Start the recipe again.") from None
    overrides = dict(manifest.plan.get("overrides") or {})
    inputs = load_inputs(recipe_copy, station_path=station_copy, uut_path=uut_copy,
                         overrides=overrides)
    source = str(run.inputs.get("station", {}).get("source", ""))
    if source and source != BUILT_IN:
        inputs.station = dataclasses.replace(inputs.station, path=Path(source))
    return inputs


def _refuse_plan_change(inputs: Inputs, manifest: Manifest, force: bool) -> None:
    """The rebuilt plan must be the one the journal was written against."""
    plan = manifest.plan
    problems = []
    if plan.get("uut_serial") not in (None, inputs.uut.serial):
        problems.append(f"UUT serial is {inputs.uut.serial!r}, the run started with "
                        f"{plan.get('uut_serial')!r}")
    if plan.get("steps") not in (None, len(inputs.plan.steps)):
        problems.append(f"the plan now has {len(inputs.plan.steps)} steps, it had "
                        f"{plan.get('steps')}")
    if plan.get("recipe") not in (None, inputs.plan.recipe):
        problems.append(f"recipe is {inputs.plan.recipe!r}, the run started with "
                        f"{plan.get('recipe')!r}")
    if problems and not force:
        raise ResumeRefused("the run folder's inputs do not rebuild the plan it started with: "
                            + "; ".join(problems) + ". Start the recipe again in a new run "
                            "folder, or pass --force if you know the difference is harmless.")


def first_identities(run: RunFolder) -> dict[str, str]:
    """The instruments' identities as the run's first preflight recorded them."""
    found: dict[str, str] = {}
    for event in read_events(run.events_path, "preflight.identity"):
        found.setdefault(str(event.get("instrument")), str(event.get("identity")))
    return found


def last_clock_time(run: RunFolder, manifest: Manifest) -> float:
    """The latest clock time the run folder records (end of the event log, else the manifest)."""
    best = max(float(manifest.start_clock), float(manifest.end_clock or 0.0))
    path = run.events_path
    if not path.is_file():
        return best
    import json

    with open(path, "rb") as fh:
        size = fh.seek(0, os.SEEK_END)
        fh.seek(max(0, size - TAIL_BYTES))
        tail = fh.read()
    for raw in reversed(tail.split(b"\n")):
        try:
            record = json.loads(raw)
        except ValueError:
            continue
        if isinstance(record, dict) and isinstance(record.get("t"), (int, float)):
            return max(best, float(record["t"]))
    return best


def interrupted_step_start(run: RunFolder, step_id: str | None) -> float | None:
    """Clock time at which the interrupted step began: its last `step.start`, else the end of
    the step before it (the next step begins the moment one ends). None if the log has neither."""
    if not run.events_path.is_file():
        return None
    started = done = None
    for event in read_events(run.events_path):
        t = event.get("t")
        if not isinstance(t, (int, float)):
            continue
        if event.get("type") == "step.start" and event.get("step") == step_id:
            started = float(t)
        elif event.get("type") == "step.done":
            done = float(t)
    return started if started is not None else done


def resume_clock(inputs: Inputs, start: float) -> Clock:
    """Simulated time for an all-simulated station, from `start` (when the interrupted step
    began); real time as soon as one instrument is real (the clock follows the instruments)."""
    from station.engine.runner import instrument_origins
    from station.engine.served import is_served, served_clock

    if is_served(inputs.station):  # the served bench kept its time; resume rewinds it per step
        return served_clock(inputs.station)
    if inputs.station.simulated and not instrument_origins(inputs.station)[1]:
        return SimClock(start=start)
    return RealClock()


def _refuse_changed_files(mismatches: list[Mismatch], run_path: Path, force: bool) -> None:
    if mismatches and not force:
        listed = "; ".join(str(m) for m in mismatches[:10])
        more = f" (and {len(mismatches) - 10} more)" if len(mismatches) > 10 else ""
        raise ResumeRefused(f"{run_path}: files of the interrupted run are not as it wrote them: "
                            f"{listed}{more}. Going on would analyse or run them as if they were "
                            "the originals. Restore them (from a backup), or pass --force to go "
                            "on with them as they are (the manifest then records it).")


def resume_run(path: Path | str, *, force: bool = False, seed: int | None = None,
               console: Console, clock: Clock | None = None,
               fault_plan: FaultPlan | None = None,
               wall: Callable[[], float] = time.time,
               watch: Callable[..., Any] | None = None) -> tuple[str, str, Path]:
    """Continue the run in `path` at its first step not in the journal.

    Returns (end state, cause, run folder). Raises ResumeRefused (a ValueError) when the folder,
    its journal or manifest is unusable, or the station/recipe/UUT changed (unless `force`),
    and RunFolderBusy (a ValueError) when another process writes the folder.
    `clock` and `fault_plan` are for in-process callers (tests, soak); the command line leaves
    them None: a simulated station then runs on simulated time. `watch(console, run, plan,
    station, uut_serial, clock)`, when given, wraps the console for remote watchers and
    notifications (station.cli.watching.watch_run).
    """
    run_path = Path(path).resolve()
    try:
        run = RunFolder.open(run_path)
    except RunFolderError as exc:
        raise ResumeRefused(str(exc)) from None
    run.take_writer_lock("resume")  # before anything is read: one writer per folder
    try:
        return _resume_locked(run, run_path, force=force, seed=seed, console=console,
                              clock=clock, fault_plan=fault_plan, wall=wall, watch=watch)
    finally:
        run.release_writer_lock()


def _resume_locked(run: RunFolder, run_path: Path, *, force: bool, seed: int | None,
                   console: Any, clock: Clock | None, fault_plan: Any,
                   wall: Callable[[], float],
                   watch: Callable[..., Any] | None) -> tuple[str, str, Path]:
    try:
        manifest = load_manifest(run_path)
        journal = run.journal
    except (ManifestError, JournalError) as exc:
        raise ResumeRefused(str(exc)) from None
    if manifest.state == "complete":
        return "complete", "already complete: every step is in the journal, nothing to resume", \
            run_path
    index = run.inputs or manifest.inputs
    if not run.inputs:
        run.inputs = dict(manifest.inputs)
    changes = check_sources(index)
    if changes and not force:
        lines = "; ".join(f"{c.role} file {c.source}: {c.problem}" for c in changes)
        raise ResumeRefused(f"{lines}. The run folder holds the copy the run started with "
                            "(inputs/); resuming against a different station or recipe could "
                            "mix incompatible data. Restore the original, or pass --force to "
                            "go on with the copies in the run folder.")
    completed = journal.completed()
    mismatches = check_recorded_files(run_path, completed, manifest.inputs or index)
    _refuse_changed_files(mismatches, run_path, force)
    inputs = load_run_inputs(run, manifest)
    _refuse_plan_change(inputs, manifest, force)
    run_seed = int(seed if seed is not None else manifest.plan.get("seed", 1))
    first_open = next((s.id for s in inputs.plan.steps if s.id not in completed), None)
    began = interrupted_step_start(run, first_open)
    clock = clock or resume_clock(inputs, began if began is not None
                                  else last_clock_time(run, manifest) + 1.0)
    run.clock = clock
    make_reserve(run_path)
    emit = run.events.emit
    emit("resume.start", completed=len(completed), total=len(inputs.plan.steps),
         previous_state=manifest.state, previous_cause=manifest.cause, forced=bool(force),
         changed_inputs=[dataclasses.asdict(c) for c in changes],
         changed_files=[str(m) for m in mismatches], step_began_at=began,
         journal_warnings=list(journal.warnings))
    aside = run.set_aside_partials()
    temporary = set_aside_temporary_files(run_path, clock=clock, events=run.events)
    note = (f"{len(completed)} of {len(inputs.plan.steps)} steps done; "
            f"{len(aside)} unfinished capture(s) set aside"
            + ("; leftover temporary files set aside" if temporary else "")
            + ("; forced past: " + ", ".join(c.role for c in changes) if changes else "")
            + ("; forced past changed files: " + ", ".join(m.path for m in mismatches)
               if mismatches else ""))
    manifest.resumed(run_path, clock, note=note,
                     accepted_changes=[str(m) for m in mismatches], wall=wall)
    if hasattr(console, "clock"):
        console.clock = clock  # the screen shows the run's (simulated) time, labelled so
    remaining_s = sum(s for step_id, s in inputs.estimate.per_step if step_id not in completed)
    watching = watch(console, run, inputs.plan, inputs.station, inputs.uut.serial, clock) \
        if watch is not None else None
    with final_state_guard(run, manifest, clock):
        with (watching.console if watching is not None else console) as live:
            for warning in journal.warnings:
                live.log("warning", warning)
            for change in changes:
                live.log("warning", f"--force: {change.role} file {change.source}: "
                         f"{change.problem}")
            for mismatch in mismatches:
                live.log("warning", f"--force: {mismatch}")
            live.log("info", f"resuming: {note}")
            live.start(len(inputs.plan.steps), remaining_s, **console_plan(inputs, completed))
            outcome = execute(inputs, run, clock, live, seed=run_seed, completed=completed,
                              fault_plan=fault_plan, manifest=manifest,
                              expected_identities=None if force else first_identities(run))
        if watching is not None:
            watching.finished(outcome.state, outcome.cause, str(run_path),
                              outcome.safing_incomplete)
    close_manifest(run, manifest, outcome.state, outcome.cause, clock, wall=wall)
    return outcome.state, outcome.cause, run_path


__all__ = ["InputChange", "ResumeRefused", "check_sources", "last_clock_time",
           "interrupted_step_start", "load_run_inputs", "resume_clock", "resume_run"]
