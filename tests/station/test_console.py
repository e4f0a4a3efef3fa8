"""Run console: plain timestamped lines off a terminal, a live display with readings on one."""

from __future__ import annotations

import io
import logging
import re

import pytest
from rich.console import Console

from drivers.clock import SimClock
from station.cli.console import RunConsole
from station.formatting import format_duration
from station.record.events import EventLog

ESC = "\x1b"  # ECMA-48: every control sequence starts with ESC (0x1B)
STAMP = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z ")  # ISO 8601 extended, UTC


def plain_console() -> tuple[Console, io.StringIO]:
    buf = io.StringIO()
    return Console(file=buf, width=80), buf


def test_not_a_terminal_gives_plain_timestamped_lines_without_escape_codes() -> None:
    clock = SimClock()
    console, buf = plain_console()
    with RunConsole(console, clock=clock) as ui:
        assert ui.plain
        ui.start(plan_len=10, estimate_s=3600)
        ui.step(1, "sweep[1].set_blackbody", "blackbody to +5 K")
        ui.readings({"blackbody_C": 27.0, "reference_C": 22.0, "stage": {"az": 1.0, "el": -2.5}})
        clock.sleep(600)
        ui.step(3, "sweep[2].set_blackbody", "blackbody to +10 K")
        ui.log("warning", "blackbody drifted 12 mK")
        ui.state("held", "blackbody left its tolerance")
    text = buf.getvalue()
    assert ESC not in text
    lines = text.splitlines()
    assert len(lines) == 6 and all(STAMP.match(line) for line in lines)
    assert lines[0].startswith("2026-01-01T00:00:00.000Z INFO")
    assert "readings blackbody 27.000 C, reference 22.000 C, stage az=1.000  el=-2.500" in lines[2]
    # After 600 s with 2 of 10 steps done the observed pace leaves 600 * 8 / 2 = 2400 s.
    assert lines[3].startswith("2026-01-01T00:10:00.000Z") and "[20%, about 0:40:00 left]" in lines[3]
    assert "WARNING blackbody drifted 12 mK" in lines[4]
    assert lines[5].endswith("STATE   held: blackbody left its tolerance")
    assert max(len(line) for line in lines) > 80  # long lines are not wrapped into two


def test_readings_lines_are_rate_limited_in_clock_time() -> None:
    clock = SimClock()
    console, buf = plain_console()
    ui = RunConsole(console, clock=clock, readings_every_s=60)
    for _ in range(600):  # ten minutes of readings once a second
        ui.readings({"blackbody_C": 30.0})
        clock.sleep(1.0)
    assert buf.getvalue().count("readings") == 10


def test_terminal_shows_step_progress_and_instrument_panel() -> None:
    clock = SimClock()
    console = Console(file=io.StringIO(), width=100, force_terminal=True, record=True)
    ui = RunConsole(console, clock=clock)
    assert not ui.plain
    ui.start(plan_len=4, estimate_s=1000)
    ui.step(3, "scan[12].capture", "capture 100 frames", estimate_done_s=500)
    ui.readings({"blackbody_C": 35.125, "reference_C": 22.004, "difference_K": 13.121,
                 "stability_mK": 3.2, "wheel_slot": 4, "target": "pinhole_grid",
                 "stage": {"az": 12.5, "el": -3.0}, "frame_rate_hz": 30.0})
    clock.sleep(250)
    ui.log("info", "stable after 184 s")
    ui.stop()
    text = console.export_text()
    for expected in ("step 3/4", "scan[12].capture", "blackbody   35.125 C", "22.004 C",
                     "13.121 K", "3.200 mK", "pinhole_grid", "az=12.500  el=-3.000", "30.000 Hz",
                     "stable after 184 s", "instruments"):
        assert expected in text, expected
    # Half of the estimate done after 250 s: pace says 250 s left, shown as 0:04:10.
    frac, elapsed, left = ui.progress()
    assert (frac, elapsed, left) == (0.5, 250.0, 250.0)
    assert "50.0%" in text and "left ~0:04:10" in text
    assert ESC in console.file.getvalue()  # a terminal does get the live display's codes


def test_terminal_without_interaction_is_plain() -> None:
    # FIELD-NOTES: colour in a log file (FORCE_COLOR) still needs no animation; rich marks such a
    # console terminal but not interactive, and we print plain lines to it.
    console = Console(file=io.StringIO(), force_terminal=True, force_interactive=False)
    assert RunConsole(console).plain


def test_early_estimate_comes_from_the_plan() -> None:
    clock = SimClock()
    ui = RunConsole(plain_console()[0], clock=clock)
    ui.start(plan_len=100, estimate_s=8 * 3600)
    ui.step(1, "a")
    clock.sleep(60)
    frac, _, left = ui.progress()
    assert frac == 0.0 and left == pytest.approx(8 * 3600 - 60)
    assert format_duration(left) == "7:59:00"


def test_event_log_and_logging_feed_the_same_console(tmp_path) -> None:  # type: ignore[no-untyped-def]
    clock = SimClock()
    console, buf = plain_console()
    ui = RunConsole(console, clock=clock)
    with EventLog(tmp_path / "e.jsonl", clock) as log:
        log.subscribe(ui.on_event)
        log.emit("state", name="paused", cause="operator pressed pause")
        log.emit("io", command="TEMP?", reply="25.001")  # routine: file only in plain mode
    logger = logging.getLogger("nightbench.test_console")
    logger.propagate = False
    handler = ui.logging_handler()
    logger.addHandler(handler)
    logger.error("stage stalled on axis el")
    logger.removeHandler(handler)
    lines = buf.getvalue().splitlines()
    assert len(lines) == 2
    assert lines[0].endswith("STATE   paused: operator pressed pause")
    assert lines[1].endswith("ERROR   nightbench.test_console: stage stalled on axis el")
