"""Telling someone elsewhere that a run ended, faulted or needs the operator.

What to do is the station file's `notify:` section (station.inputs.notify_settings). A failure
to notify is recorded in the run's event log and never affects the run: the run's record is the
run folder, a notification is a courtesy. A command gets the summary as JSON on its standard
input and the occasion in NIGHTBENCH_OCCASION; a URL gets the same JSON by POST.
"""

from __future__ import annotations

import json
import os
import subprocess
import threading
import urllib.error
import urllib.request
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

from station.inputs.notify_settings import NotifySettings

__all__ = ["Notifier", "NotifyFollower"]


@dataclass
class Notifier:
    """Sends notifications and records each outcome through ``emit`` (the run's event log)."""

    settings: NotifySettings
    emit: Callable[..., None]
    base: Mapping[str, Any] = field(default_factory=dict)
    _sent_operator: set[str] = field(default_factory=set)

    def send(self, occasion: str, summary: Mapping[str, Any], *, wait: bool = True) -> None:
        """Notify for `occasion` if the station asks for it. Never raises. With wait=False the
        work happens on a background thread (mid-run occasions must not hold the run)."""
        if not self.settings.active or occasion not in self.settings.occasions:
            return
        body = {**self.base, **summary, "occasion": occasion}
        if wait:
            self._deliver(occasion, body)
        else:
            threading.Thread(target=self._deliver, args=(occasion, body), daemon=True).start()

    def operator_needed(self, state: str, cause: str) -> None:
        """A console follower hook: held or paused runs need the operator (once per state)."""
        if state in ("held", "paused") and state not in self._sent_operator:
            self._sent_operator.add(state)
            self.send("operator", {"state": state, "cause": cause}, wait=False)
        elif state == "running":
            self._sent_operator.clear()

    def _deliver(self, occasion: str, body: Mapping[str, Any]) -> None:
        data = json.dumps(body, default=str).encode("utf-8")
        if self.settings.command:
            self._run_command(occasion, data)
        if self.settings.url:
            self._post(occasion, data)

    def _run_command(self, occasion: str, data: bytes) -> None:
        try:
            done = subprocess.run(list(self.settings.command), input=data, capture_output=True,
                                  timeout=self.settings.timeout_s, check=False,
                                  env={**os.environ, "NIGHTBENCH_OCCASION": occasion})
            if done.returncode == 0:
                self._record("notify.sent", occasion, "command", "")
            else:
                self._record("notify.failed", occasion, "command",
                             f"exit {done.returncode}: {done.stderr.decode(errors='replace')[:200]}")
        except (OSError, subprocess.SubprocessError) as exc:
            self._record("notify.failed", occasion, "command", str(exc))

    def _post(self, occasion: str, data: bytes) -> None:
        request = urllib.request.Request(self.settings.url, data=data, method="POST",
                                         headers={"Content-Type": "application/json"})
        try:
            with urllib.request.urlopen(request, timeout=self.settings.timeout_s) as reply:
                self._record("notify.sent", occasion, "url", f"HTTP {reply.status}")
        except (OSError, urllib.error.URLError, ValueError) as exc:
            self._record("notify.failed", occasion, "url", str(exc))

    def _record(self, kind: str, occasion: str, via: str, detail: str) -> None:
        try:
            self.emit(kind, occasion=occasion, via=via, detail=detail)
        except Exception:  # the event log may already be closed at the very end of a run
            pass


class NotifyFollower:
    """A console follower that notifies when the run needs the operator (held or paused)."""

    def __init__(self, notifier: Notifier) -> None:
        self.notifier = notifier

    def start(self, plan_len: int, estimate_s: float, **kw: Any) -> None:
        pass

    def step(self, index: int, step_id: str, description: str = "", **kw: Any) -> None:
        pass

    def readings(self, values: Mapping[str, Any]) -> None:
        pass

    def log(self, level: str | int, text: str) -> None:
        pass

    def state(self, name: str, cause: str | None = None) -> None:
        self.notifier.operator_needed(name, cause or "")

    def stop(self) -> None:
        pass
