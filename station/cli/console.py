"""The operator's live view of a run: step, progress and time left, instrument readings, log lines.

Why two faces: at the bench the engineer watches a live display in a terminal; overnight the same
run is often started under `nohup` or from CI with output to a file, where animation codes make an
unreadable log. So when the console is not an interactive terminal, every update is one plain,
timestamped line with no escape codes (rich prints a live display's last frame glued to the next
line when output is not a terminal: we never start one there).

Readings keys shown with a label (others are shown as they come)::

    blackbody_C, reference_C, difference_K, stability_mK, stable, wheel_slot, target,
    stage (dict axis -> position), frame_rate_hz

Example::

    with RunConsole(clock=clock) as ui:
        ui.start(plan_len=42, estimate_s=8 * 3600)
        ui.step(1, "sweep[1].set_blackbody", "blackbody to +5 K")
        ui.readings({"blackbody_C": 27.0, "reference_C": 22.0})
        ui.log("info", "stable after 184 s")
"""

from __future__ import annotations

import logging
import threading
from collections import deque
from collections.abc import Sequence, Mapping
from typing import Any

from rich.console import Console, Group
from rich.live import Live
from rich.panel import Panel
from rich.progress_bar import ProgressBar
from rich.table import Table
from rich.text import Text

from drivers.clock import Clock, RealClock
from station.formatting import format_duration, format_value
from station.record.events import utc_iso

READING_LABELS: dict[str, tuple[str, str]] = {
    "blackbody_C": ("blackbody", "C"),
    "reference_C": ("reference", "C"),
    "difference_K": ("difference", "K"),
    "stability_mK": ("stability", "mK"),
    "stable": ("stable", ""),
    "wheel_slot": ("wheel slot", ""),
    "target": ("target", ""),
    "stage": ("stage", ""),
    "frame_rate_hz": ("frame rate", "Hz"),
}
LEVEL_STYLES = {"DEBUG": "dim", "INFO": "", "WARNING": "yellow", "ERROR": "bold red",
                "CRITICAL": "bold red"}


class RunConsole:
    """Live display on a terminal, plain timestamped lines elsewhere; one shared rich Console."""

    def __init__(self, console: Console | None = None, plain: bool | None = None, *,
                 clock: Clock | None = None, log_lines: int = 8, readings_every_s: float = 60.0,
                 refresh_per_second: float = 4.0) -> None:
        self.console = console or Console()
        self.plain = (not self.console.is_interactive) if plain is None else plain
        self.clock: Clock = clock or RealClock()
        self.readings_every_s = readings_every_s
        self.refresh_per_second = refresh_per_second
        self._lock = threading.RLock()
        self._lines: deque[tuple[str, str, str]] = deque(maxlen=log_lines)
        self._readings: dict[str, Any] = {}
        self._last_readings_print: float | None = None
        self._plan_len = 0
        self._estimate_s = 0.0
        self._start_t: float | None = None
        self._index = 0
        self._step_id = ""
        self._description = ""
        self._done_s: float | None = None
        self._state = "idle"
        self._cause: str | None = None
        self._live: Live | None = None

    # -- the API the sequencer calls -----------------------------------------------------------
    def start(self, plan_len: int, estimate_s: float) -> None:
        """Begin a run of `plan_len` steps estimated to take `estimate_s` seconds of clock time."""
        with self._lock:
            self._plan_len, self._estimate_s = int(plan_len), float(estimate_s)
            self._start_t = self.clock.now()
        if self.plain:
            self._print("INFO", f"run of {plan_len} steps, estimated {format_duration(estimate_s)}"
                        f"{' (simulated clock)' if self.clock.simulated else ''}")
        elif self._live is None:
            self._live = Live(console=self.console, get_renderable=self.render,
                              refresh_per_second=self.refresh_per_second, transient=False,
                              redirect_stdout=False, redirect_stderr=False)
            self._live.start()

    def step(self, index: int, step_id: str, description: str = "", *,
             estimate_done_s: float | None = None) -> None:
        """Step `index` (1-based) of the plan is starting. `estimate_done_s`: the plan's estimate
        of the time taken by the steps before it (better progress than counting steps)."""
        with self._lock:
            self._index, self._step_id, self._description = int(index), step_id, description
            self._done_s = estimate_done_s
        if self.plain:
            frac, _, left = self.progress()
            self._print("INFO", f"step {index}/{self._plan_len} {step_id}"
                        f"{': ' + description if description else ''} "
                        f"[{frac * 100:.0f}%, about {format_duration(left)} left]")
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
            self._print("INFO", "readings " + ", ".join(
                f"{READING_LABELS.get(k, (k, ''))[0]} {format_value(v, READING_LABELS.get(k, ('', ''))[1])}"
                for k, v in self._ordered(snapshot)))

    def log(self, level: str | int, text: str) -> None:
        """A log line: printed in plain mode, kept among the last lines on the live display."""
        name = logging.getLevelName(level) if isinstance(level, int) else str(level).upper()
        stamp = utc_iso(self.clock.now())
        with self._lock:
            self._lines.append((stamp, name, text))
        if self.plain:
            self._print(name, text, stamp)
        elif self._live is not None and name in ("WARNING", "ERROR", "CRITICAL"):
            self.console.print(Text(f"{stamp} {name} {text}", style=LEVEL_STYLES.get(name, "")))
        self._refresh()

    def state(self, name: str, cause: str | None = None) -> None:
        """The sequencer changed state; shown with its cause and always printed."""
        with self._lock:
            self._state, self._cause = name, cause
        text = name + (f": {cause}" if cause else "")
        if self.plain:
            self._print("STATE", text)
        else:
            self.console.print(Text(f"{utc_iso(self.clock.now())} state {text}", style="bold"))
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
        fields = ", ".join(f"{k}={format_value(v)}" for k, v in record.items()
                           if k not in ("seq", "t", "utc", "type"))
        with self._lock:
            self._lines.append((str(record.get("utc", "")), "EVENT", f"{kind} {fields}"[:160]))

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
    def progress(self) -> tuple[float, float, float | None]:
        """(fraction done, clock seconds elapsed, seconds left).

        Fraction: the plan's estimate of the finished steps over the total when given, else steps
        finished over steps. Time left: the plan estimate for the rest (less the time already spent in
        the running step) until 5 % is done, then the
        observed pace (elapsed / fraction), which absorbs a plan that is optimistic or pessimistic.
        """
        with self._lock:
            if self._start_t is None:
                return 0.0, 0.0, None
            elapsed = max(self.clock.now() - self._start_t, 0.0)
            if self._done_s is not None and self._estimate_s > 0:
                frac = self._done_s / self._estimate_s
            elif self._plan_len > 0:
                frac = max(self._index - 1, 0) / self._plan_len
            else:
                frac = 0.0
            frac = min(max(frac, 0.0), 1.0)
            if frac < 0.05:
                # time already spent in the step running counts against the plan's remainder
                left = max(min(self._estimate_s * (1 - frac), self._estimate_s - elapsed), 0.0)
            else:
                left = elapsed * (1 - frac) / frac
            return frac, elapsed, left

    def render(self) -> Group:
        """The live display as a rich renderable (also usable for a snapshot)."""
        frac, elapsed, left = self.progress()
        with self._lock:
            header = Text()
            header.append(f"{self._state.upper()}", style="bold")
            if self._cause:
                header.append(f" ({self._cause})")
            header.append(f"   step {self._index}/{self._plan_len}  ")
            header.append(self._step_id, style="cyan")
            if self._description:
                header.append(f"  {self._description}")
            bar = Table.grid(padding=(0, 1))
            bar.add_row(ProgressBar(total=1.0, completed=frac, width=40),
                        Text(f"{frac * 100:5.1f}%  elapsed {format_duration(elapsed)}  "
                             f"left ~{format_duration(left)}"
                             f"{'  (simulated clock)' if self.clock.simulated else ''}"))
            table = Table.grid(padding=(0, 2))
            for key, value in self._ordered(self._readings):
                label, unit = READING_LABELS.get(key, (key, ""))
                table.add_row(Text(label, style="bold"), Text(format_value(value, unit)))
            lines = Text("\n".join(f"{s[11:19]} {lvl:<7} {msg}" for s, lvl, msg in self._lines)
                         or "-")
        return Group(header, bar, Panel(table, title="instruments", expand=True),
                     Panel(lines, title="recent", expand=True))

    @staticmethod
    def _ordered(values: Mapping[str, Any]) -> list[tuple[str, Any]]:
        known = [(k, values[k]) for k in READING_LABELS if k in values]
        return known + sorted((k, v) for k, v in values.items() if k not in READING_LABELS)

    def _refresh(self, force: bool = False) -> None:
        """Redraw now on a state change; otherwise the live display's own timer redraws it, so a
        simulated run emitting thousands of lines a second does not spend its time drawing."""
        if force and self._live is not None and not self.plain:
            self._live.refresh()

    def _print(self, level: str, text: str, stamp: str | None = None) -> None:
        line = f"{stamp or utc_iso(self.clock.now())} {level:<7} {text}"
        self.console.print(line, markup=False, highlight=False, emoji=False, soft_wrap=True,
                           style=None)


def print_table(console: Console, title: str, columns: list[str] | tuple[str, ...],
                rows: Sequence[Sequence[object]]) -> None:
    """A titled table of plain cells (every cell shown with str())."""
    table = Table(title=title)
    for c in columns:
        table.add_column(c)
    for r in rows:
        table.add_row(*[str(x) for x in r])
    console.print(table)
