"""The operator's live view of a run: step, progress and time left, instrument readings, log lines.

Why two faces: at the bench the engineer watches a live display in a terminal; overnight the same
run is often started under `nohup` or from CI with output to a file, where animation codes make an
unreadable log. So when the console is not an interactive terminal, every update is one plain,
timestamped line with no escape codes (rich prints a live display's last frame glued to the next
line when output is not a terminal: we never start one there).

Numbers are formatted by station.formatting (the same text in `bench`, the logs and the report);
time left comes from station.engine.progress (the plan's per-step estimates corrected by the pace
of the run, never jumping by more than the current step's estimate). Steps are numbered 1..N.
Times of a simulated run are labelled "simulated"; the expected end is local clock time.

Example::

    with RunConsole(clock=clock) as ui:
        ui.start(plan_len=42, estimate_s=8 * 3600, per_step_s=estimates)
        ui.step(1, "sweep[1].set_blackbody", "blackbody to +5 K")
        ui.readings({"blackbody": {"mode": "difference", "temperature_c": 27.0,
                                   "reference_c": 22.0}})
        ui.log("info", "stable after 184 s")
"""

from __future__ import annotations

import logging
import threading
import time
from collections import deque
from collections.abc import Callable, Iterable, Mapping, Sequence
from typing import Any

from rich.console import Console, Group
from rich.live import Live
from rich.panel import Panel
from rich.progress_bar import ProgressBar
from rich.table import Table
from rich.text import Text

from drivers.clock import Clock, RealClock
from station.cli.tables import print_table  # noqa: F401  (kept here for callers)
from station.engine.progress import Progress, ProgressTracker
from station.formatting import (format_clock_time, format_duration, format_value, reading_lines,
                                readings_text)


def utc_iso(seconds: float) -> str:
    """The event log's timestamp form (imported on use: the record package loads numpy, which
    `nightbench recipes` must not wait for)."""
    from station.record.events import utc_iso as _utc_iso

    return _utc_iso(seconds)


LEVEL_STYLES = {"DEBUG": "dim", "INFO": "", "WARNING": "yellow", "ERROR": "bold red",
                "CRITICAL": "bold red"}
STOPPED_STATES = frozenset({"safing", "aborted", "faulted"})
SCREEN_FIXED_ROWS = 6
"""Rows of the live display besides the readings and the recent lines (header, progress line,
the two panels' borders)."""


class RunConsole:
    """Live display on a terminal, plain timestamped lines elsewhere; one shared rich Console."""

    def __init__(self, console: Console | None = None, plain: bool | None = None, *,
                 clock: Clock | None = None, log_lines: int = 200, readings_every_s: float = 60.0,
                 refresh_per_second: float = 4.0,
                 wall: Callable[[], float] = time.time) -> None:
        self.console = console or Console()
        self.plain = (not self.console.is_interactive) if plain is None else plain
        self.clock: Clock = clock or RealClock()
        self.wall = wall
        self.readings_every_s = readings_every_s
        self.refresh_per_second = refresh_per_second
        self._lock = threading.RLock()
        self._lines: deque[tuple[str, str, str]] = deque(maxlen=log_lines)
        self._readings: dict[str, Any] = {}
        self._axis_units: dict[str, str] = {}
        self._last_readings_print: float | None = None
        self._tracker: ProgressTracker | None = None
        self._plan_len = 0
        self._index = 0
        self._step_id = ""
        self._description = ""
        self._state = "idle"
        self._cause: str | None = None
        self._live: Live | None = None

    # -- the API the sequencer calls -----------------------------------------------------------
    def start(self, plan_len: int, estimate_s: float, *,
              per_step_s: Sequence[float] | None = None, done: Iterable[int] = (),
              axis_units: Mapping[str, str] | None = None) -> None:
        """Begin a run of `plan_len` steps. `per_step_s`: the plan's estimate of each step (clock
        seconds; without it `estimate_s` is shared evenly); `done`: 1-based steps already done
        (a resumed run); `axis_units`: the stage axes' units for the readings."""
        estimates = list(per_step_s) if per_step_s is not None else (
            [float(estimate_s) / plan_len] * plan_len if plan_len else [])
        with self._lock:
            self._plan_len = int(plan_len)
            self._tracker = ProgressTracker(estimates, done=done)
            self._tracker.begin(self.clock.now())
            self._axis_units = dict(axis_units or {})
        if self.plain:
            self._print("INFO", f"run of {plan_len} steps, estimated "
                        f"{format_duration(sum(estimates))}{self._sim_label()}")
        elif self._live is None:
            self._live = Live(console=self.console, get_renderable=self.render,
                              refresh_per_second=self.refresh_per_second, transient=False,
                              redirect_stdout=False, redirect_stderr=False)
            self._live.start()

    def step(self, index: int, step_id: str, description: str = "", **_: Any) -> None:
        """Step `index` (1-based) of the plan is starting; the one before it has finished."""
        now = self.clock.now()
        with self._lock:
            tracker = self._tracker
            if tracker is not None:
                if self._index:
                    tracker.step_finished(self._index, now)
                tracker.step_started(int(index), now)
            self._index, self._step_id, self._description = int(index), step_id, description
        if self.plain:
            self._print("INFO", f"step {index}/{self._plan_len} {step_id}"
                        f"{': ' + description if description else ''} "
                        f"[{self.progress_text(short=True)}]")
        self._refresh()

    def readings(self, values: Mapping[str, object]) -> None:
        """New instrument readings; in plain mode printed at most every `readings_every_s`."""
        now = self.clock.now()
        with self._lock:
            self._readings.update(values)
            due = (self._last_readings_print is None
                   or now - self._last_readings_print >= self.readings_every_s)
            if due:
                self._last_readings_print = now
            snapshot = dict(self._readings)
        if self.plain and due:
            self._print("INFO", "readings " + readings_text(snapshot, axis_units=self._axis_units))

    def log(self, level: str | int, text: str) -> None:
        """A log line: printed in plain mode, kept among the recent lines on the live display."""
        name = logging.getLevelName(level) if isinstance(level, int) else str(level).upper()
        stamp = utc_iso(self.clock.now())
        with self._lock:
            self._lines.append((stamp, name, text))
        if self.plain:
            self._print(name, text, stamp)
        elif self._live is not None and name in ("WARNING", "ERROR", "CRITICAL"):
            self.console.print(Text(f"{self._stamp(stamp)} {name} {text}",
                                    style=LEVEL_STYLES.get(name, "")))
        self._refresh()

    def state(self, name: str, cause: str | None = None) -> None:
        """The sequencer changed state; shown with its cause and always printed."""
        now = self.clock.now()
        with self._lock:
            self._state, self._cause = name, cause
            if name == "complete" and self._tracker is not None:
                if self._index:
                    self._tracker.step_finished(self._index, now)
                self._tracker.finish()
        text = name + (f": {cause}" if cause else "")
        if self.plain:
            self._print("STATE", text)
            if name == "complete":
                self._print("INFO", self.progress_text())
        else:
            self.console.print(Text(f"{self._stamp(utc_iso(now))} state {text}", style="bold"))
            self._refresh(force=True)

    def stop(self) -> None:
        """Stop the live display (its last frame stays on screen). Safe to call twice."""
        live, self._live = self._live, None
        if live is not None:
            live.update(self.render(), refresh=True)
            live.stop()

    def __enter__(self) -> RunConsole:
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()

    # -- hooks for the event log and logging -------------------------------------------------------
    def on_event(self, record: Mapping[str, object]) -> None:
        """EventLog subscriber: state events update the state; others go to the recent lines
        on the live display only (in plain mode the event log file already holds them)."""
        kind = str(record.get("type", ""))
        if kind == "state":
            self.state(str(record.get("name", "?")), record.get("cause"))
            return
        if self.plain:
            return
        fields = ", ".join(f"{k} {format_value(v)}" for k, v in record.items()
                           if k not in ("seq", "t", "utc", "type"))
        with self._lock:
            self._lines.append((str(record.get("utc", "")), "EVENT", f"{kind}: {fields}"[:160]))

    def logging_handler(self, level: int = logging.INFO) -> logging.Handler:
        """A logging handler that writes through this console (one shared Console)."""
        ui = self

        class _Handler(logging.Handler):
            def emit(self, record: logging.LogRecord) -> None:
                try:
                    ui.log(record.levelno, self.format(record))
                except Exception:
                    self.handleError(record)

        handler = _Handler(level)
        handler.setFormatter(logging.Formatter("%(name)s: %(message)s"))
        return handler

    # -- progress and rendering --------------------------------------------------------------------
    def progress(self) -> Progress:
        """Step (1-based), fraction done, elapsed and left in clock seconds (see progress.py)."""
        with self._lock:
            if self._tracker is None:
                return Progress(0, self._plan_len, 0.0, 0.0, 0.0, 1.0, False)
            return self._tracker.snapshot(self.clock.now())

    def progress_text(self, short: bool = False) -> str:
        """`25%, elapsed 0:01:10, about 0:03:30 left, ends about 14:32` in the run's clocks;
        finished: `100%, total 0:04:40`; stopped: `40% done, stopped after 0:02:00`. Times of a
        simulated run end with `(simulated)`."""
        p = self.progress()
        label = " (simulated)" if self.clock.simulated else ""
        if p.finished:
            return f"100%, total {format_duration(p.elapsed_s)}{label}"
        if self._state in STOPPED_STATES:
            return (f"{p.fraction * 100:.0f}% done, stopped after "
                    f"{format_duration(p.elapsed_s)}{label}")
        text = (f"{p.fraction * 100:.0f}%, " + ("" if short else
                f"elapsed {format_duration(p.elapsed_s)}, ")
                + f"about {format_duration(p.left_s)} left{label}")
        end = self.expected_end(p)
        if end is not None:
            text += f", ends about {end}"
        return text

    def expected_end(self, p: Progress) -> str | None:
        """Local clock time of the expected end: real clock, or a paced simulation (by its
        speed); None for an unpaced simulation (it ends when the computer is done)."""
        now = self.wall()
        if not self.clock.simulated:
            return format_clock_time(now + p.left_s, now)
        speed = getattr(self.clock, "speed", None)
        if speed:
            return format_clock_time(now + p.left_s / float(speed), now) + f" at {speed:g}x"
        return None

    def render(self) -> Group:
        """The live display as a rich renderable (also usable for a snapshot)."""
        p = self.progress()
        with self._lock:
            header = Text(no_wrap=True, overflow="ellipsis")
            header.append(f"{self._state.upper()}", style="bold")
            if self._cause:
                header.append(f" ({self._cause})")
            header.append(f"   step {p.step}/{p.steps}  ")
            header.append(self._step_id, style="cyan")
            if self._description:
                header.append(f"  {self._description}")
            bar = Table.grid(padding=(0, 1))
            bar.add_row(ProgressBar(total=1.0, completed=p.fraction, width=30),
                        Text(self.progress_text()))
            table = Table.grid(padding=(0, 2))
            rows = reading_lines(self._readings, axis_units=self._axis_units)
            for label, text in rows:
                table.add_row(Text(label, style="bold"), Text(text))
            room = max(self.console.height - SCREEN_FIXED_ROWS - max(len(rows), 1) - 1, 3)
            recent = list(self._lines)[-room:]  # the newest lines that fit: the panel scrolls
            lines = Text("\n".join(f"{s[11:19]} {lvl:<7} {msg}" for s, lvl, msg in recent)
                         or "-", overflow="ellipsis", no_wrap=True)
        recent_title = "recent (simulated time)" if self.clock.simulated else "recent"
        return Group(header, bar, Panel(table, title="instruments", expand=True),
                     Panel(lines, title=recent_title, expand=True))

    def _stamp(self, utc_text: str) -> str:
        """hh:mm:ss of a log line; simulated time says so."""
        return utc_text[11:19] + (" simulated" if self.clock.simulated else "")

    def _sim_label(self) -> str:
        return " (simulated time)" if self.clock.simulated else ""

    def _refresh(self, force: bool = False) -> None:
        """Redraw now on a state change; otherwise the live display's own timer redraws it, so a
        simulated run emitting thousands of lines a second does not spend its time drawing."""
        if force and self._live is not None and not self.plain:
            self._live.refresh()

    def _print(self, level: str, text: str, stamp: str | None = None) -> None:
        when = stamp or utc_iso(self.clock.now())
        if self.clock.simulated:
            when += " simulated"
        line = f"{when} {level:<7} {text}"
        self.console.print(line, markup=False, highlight=False, emoji=False, soft_wrap=True,
                           style=None)
