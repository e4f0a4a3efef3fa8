"""The station file's `notify:` section: who hears that a run ended, faulted or needs the operator.

The station file may name, under `notify:`, a command to run and/or a URL to POST a JSON summary
to, and on which occasions::

    notify:
      when: [end, fault, operator]     # default: all three ('on' would be read by YAML as true)
      command: ["/usr/local/bin/page-oncall", "--bench", "bay2"]   # argv list; no shell
      url: http://127.0.0.1:9000/bench-events
      timeout_s: 5

Why this shape: overnight nobody watches a terminal. A failure to notify is recorded in the run's
event log and never affects the run: the run's record is the run folder, a notification is a
courtesy. The command gets the summary as JSON on its standard input and the occasion in the
environment variable NIGHTBENCH_OCCASION; the POST body is the same JSON.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

__all__ = ["OCCASIONS", "NotifySettings", "notify_problems", "parse_notify"]

OCCASIONS = ("end", "fault", "operator")


@dataclass(frozen=True)
class NotifySettings:
    """What the station file's `notify:` section asks for."""

    occasions: frozenset[str] = frozenset(OCCASIONS)
    command: tuple[str, ...] = ()
    url: str = ""
    timeout_s: float = 5.0

    @property
    def active(self) -> bool:
        return bool(self.command or self.url)


def notify_problems(raw: Any) -> list[tuple[str, str]]:
    """(key, message) for every problem of a `notify:` section (empty when it is fine)."""
    problems: list[tuple[str, str]] = []
    if not isinstance(raw, Mapping):
        return [("", "'notify' must be a mapping with 'command' and/or 'url'")]
    for key in raw:
        if isinstance(key, bool):
            problems.append(("", f"a key under notify was read by YAML as {str(key).lower()} "
                                 "(on, off, yes, no are booleans): write 'when:' for occasions, "
                                 "or quote the key"))
        elif key not in ("when", "command", "url", "timeout_s"):
            problems.append((str(key), f"unknown key '{key}' under notify (known: when, command, "
                                       "url, timeout_s)"))
    when = raw.get("when", list(OCCASIONS))
    if not isinstance(when, list) or any(o not in OCCASIONS for o in when):
        problems.append(("when", f"'when' must be a list of {', '.join(OCCASIONS)}"))
    command = raw.get("command", [])
    if isinstance(command, str):
        command = [command]
    if not isinstance(command, list) or not all(isinstance(c, str) and c for c in command):
        problems.append(("command", "'command' must be a program and its arguments as a list "
                                    "of text, e.g. [/usr/local/bin/page-oncall, --bench, bay2]"))
    url = raw.get("url", "")
    if url and (not isinstance(url, str) or not url.startswith(("http://", "https://"))):
        problems.append(("url", "'url' must start with http:// or https://"))
    timeout = raw.get("timeout_s", 5.0)
    if isinstance(timeout, bool) or not isinstance(timeout, (int, float)) or not 0 < timeout <= 60:
        problems.append(("timeout_s", "'timeout_s' must be a number of seconds from 0 to 60"))
    if not command and not url:
        problems.append(("", "notify needs a 'command' or a 'url' (or both)"))
    return problems


def parse_notify(raw: Mapping[str, Any] | None) -> NotifySettings:
    """Settings from a section already checked by :func:`notify_problems` (None: notify nobody)."""
    if not raw:
        return NotifySettings()
    command = raw.get("command", [])
    return NotifySettings(frozenset(raw.get("when", OCCASIONS)),
                          tuple([command] if isinstance(command, str) else command),
                          str(raw.get("url", "") or ""), float(raw.get("timeout_s", 5.0)))
