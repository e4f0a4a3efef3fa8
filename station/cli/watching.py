"""Glue between a run and the people watching it from elsewhere: the live-status file a monitor
reads, operator requests left by a monitor, and the station's notifications.

Requests from a monitor take the run's ordinary safe paths: each is recorded in the event log
with its source, then delivered as the signal an operator at the terminal would send (SIGUSR1
pause, SIGUSR2 continue, SIGTERM abort, which safes the bench), so there is one way to pause or
abort a run, whoever asks.
"""

from __future__ import annotations

import os
import signal
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from drivers.clock import Clock
from station.cli.tee import ConsoleTee
from station.engine.notify import Notifier, NotifyFollower
from station.engine.safing import Shortfall
from station.record.live import LiveStatusWriter

__all__ = ["Watching", "watch_run"]

_SIGNALS = {"pause": getattr(signal, "SIGUSR1", None), "continue": getattr(signal, "SIGUSR2", None),
            "abort": signal.SIGTERM}


@dataclass
class Watching:
    """The console to hand to the engine, and the notifier for the run's end."""

    console: ConsoleTee
    notifier: Notifier

    def finished(self, state: str, cause: str, run_path: str,
                 safing_incomplete: Sequence[Shortfall] = ()) -> None:
        """Notify the end of the run. A fault is its own occasion, and so is safing that left
        an instrument live (even after an abort): the summary then lists each such instrument
        and what must be done by hand, for whoever is paged."""
        occasion = "fault" if state == "faulted" or safing_incomplete else "end"
        summary: dict[str, Any] = {"state": state, "cause": cause, "run_folder": run_path}
        if safing_incomplete:
            summary["safing_incomplete"] = [s.as_dict() for s in safing_incomplete]
            summary["by_hand"] = [f"{s.instrument}: {s.by_hand}" for s in safing_incomplete]
        self.notifier.send(occasion, summary)


def watch_run(screen: Any, run: Any, plan: Any, station: Any, uut_serial: str,
              clock: Clock) -> Watching:
    """Wrap the operator's screen so the live status follows it and requests are obeyed."""
    emit = run.events.emit

    def on_request(action: str, source: str) -> None:
        emit("operator.request", action=action, source=source)
        sig = _SIGNALS.get(action)
        if sig is None:
            screen.log("warning", f"ignored an unknown request {action!r} from {source}")
            return
        screen.log("warning", f"{action} requested from {source}")
        os.kill(os.getpid(), sig)

    sources = {s.id: str(s.source) for s in plan.steps if getattr(s, "source", None) is not None}
    writer = LiveStatusWriter(run.path, clock, recipe=plan.recipe, uut_serial=uut_serial,
                              step_sources=sources, on_request=on_request)
    notifier = Notifier(station.notify, emit, base={"recipe": plan.recipe,
                                                    "uut_serial": uut_serial,
                                                    "station": station.name})
    return Watching(ConsoleTee(screen, writer, NotifyFollower(notifier)), notifier)
