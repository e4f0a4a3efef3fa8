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


READINGS = {"blackbody": {"mode": "difference", "setpoint": 13.0, "temperature_c": 35.125,
                          "reference_c": 22.004, "stable": True},
            "wheel": {"slot": 4, "target": "pinhole_grid", "moving": False},
            "stage": {"az": 12.5, "el": -3.0, "states": {"az": "READY", "el": "READY"}},
            "camera": {"frames": 1234, "frame_rate_hz": 30.0}}
AXIS_UNITS = {"az": "deg", "el": "deg"}


def test_not_a_terminal_gives_plain_timestamped_lines_without_escape_codes() -> None:
    clock = SimClock()
    console, buf = plain_console()
    with RunConsole(console, clock=clock) as ui:
        assert ui.plain
        ui.start(plan_len=10, estimate_s=3600, axis_units=AXIS_UNITS)
        ui.step(1, "sweep[1].set_blackbody", "blackbody to +5 K")
        ui.readings(READINGS)
        clock.sleep(600)
        ui.step(3, "sweep[2].set_blackbody", "blackbody to +10 K")
        ui.log("warning", "blackbody drifted 12 mK")
        ui.state("held", "blackbody left its tolerance")
    text = buf.getvalue()
    assert ESC not in text
    lines = text.splitlines()
    assert len(lines) == 6 and all(STAMP.match(line) for line in lines)
    assert lines[0].startswith("2026-01-01T00:00:00.000Z simulated INFO")
    assert ("readings blackbody difference +13.121 K (source 35.125 C, reference 22.004 C), "
            "setpoint +13.000 K, stable; wheel slot 4 pinhole_grid; stage az +12.500 deg, "
            "el -3.000 deg; camera frame 1234 at 30.0 Hz") in lines[2]
    assert "{" not in text and "'" not in text  # no Python syntax on screen
    # 10 steps of 360 s; the first took 600 s, so the time left held at 9 x 360 = 3240 s while
    # it overran. Ratio (600 + 180) / (360 + 180) = 1.444 (prior W = max(60 s, 5 % of 3600 s)
    # = 180 s): raw left 1.444 x 9 x 360 = 4680 s, shown at most one step (360 s) above 3240 s.
    assert lines[3].startswith("2026-01-01T00:10:00.000Z") and "step 3/10" in lines[3]
    assert "about 1:00:00 left (simulated)]" in lines[3]
    assert "WARNING blackbody drifted 12 mK" in lines[4]
    assert lines[5].endswith("STATE   held: blackbody left its tolerance")
    assert max(len(line) for line in lines) > 80  # long lines are not wrapped into two


def test_readings_lines_are_rate_limited_in_clock_time() -> None:
    clock = SimClock()
    console, buf = plain_console()
    ui = RunConsole(console, clock=clock, readings_every_s=60)
    for _ in range(600):  # ten minutes of readings once a second
        ui.readings({"blackbody": {"temperature_c": 30.0}})
        clock.sleep(1.0)
    assert buf.getvalue().count("readings") == 10


def test_terminal_shows_step_progress_and_instrument_panel() -> None:
    clock = SimClock()
    console = Console(file=io.StringIO(), width=120, height=30, force_terminal=True, record=True)
    ui = RunConsole(console, clock=clock)
    assert not ui.plain
    ui.start(plan_len=4, estimate_s=1000, per_step_s=[250.0, 250.0, 250.0, 250.0],
             axis_units=AXIS_UNITS)
    ui.step(1, "s1.wait", "wait 250")
    clock.sleep(250)
    ui.step(2, "s2.wait", "wait 250")
    clock.sleep(250)
    ui.step(3, "scan[12].capture", "capture 100 frames")
    ui.readings(READINGS)
    clock.sleep(125)
    for n in range(40):  # more lines than the panel holds: the newest stay on screen
        ui.log("info", f"line {n}")
    ui.stop()
    text = console.export_text()
    for expected in ("step 3/4", "scan[12].capture", "difference +13.121 K", "source 35.125 C",
                     "reference 22.004 C", "setpoint +13.000 K", "slot 4 pinhole_grid",
                     "az +12.500 deg, el -3.000 deg", "frame 1234 at 30.0 Hz", "line 39",
                     "instruments", "simulated"):
        assert expected in text, expected
    assert "line 0 " not in text
    # steps ran exactly as estimated: 625 s of 1000 done, 375 s left, shown as 0:06:15
    p = ui.progress()
    assert (p.step, p.fraction, p.elapsed_s, p.left_s) == (3, 0.625, 625.0, 375.0)
    assert "62%" in text and "about 0:06:15 left (simulated)" in text
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
    p = ui.progress()
    assert p.fraction == pytest.approx(60 / (8 * 3600)) and p.left_s == pytest.approx(8 * 3600 - 60)
    assert format_duration(p.left_s) == "7:59:00"


def test_final_screen_shows_100_percent_and_the_total() -> None:
    clock = SimClock()
    console, buf = plain_console()
    ui = RunConsole(console, clock=clock)
    ui.start(plan_len=2, estimate_s=100, per_step_s=[50.0, 50.0])
    ui.step(1, "a")
    clock.sleep(70)
    ui.step(2, "b")
    clock.sleep(70)
    ui.state("complete", "all steps done")
    p = ui.progress()
    assert (p.step, p.fraction, p.left_s, p.elapsed_s) == (2, 1.0, 0.0, 140.0)
    assert buf.getvalue().splitlines()[-1].endswith("100%, total 0:02:20 (simulated)")


def test_real_clock_shows_the_expected_end_as_local_time() -> None:
    class Wall:  # a real (not simulated) clock standing still at a chosen instant
        simulated = False

        def now(self) -> float:
            return 1_800_000_000.0

    ui = RunConsole(plain_console()[0], clock=Wall(), wall=lambda: 1_800_000_000.0)
    ui.start(plan_len=1, estimate_s=5400)
    ui.step(1, "a")
    import datetime as dt
    end = dt.datetime.fromtimestamp(1_800_000_000.0 + 5400).astimezone().strftime("%H:%M")
    assert ui.progress_text() == f"0%, elapsed 0:00:00, about 1:30:00 left, ends about {end}"


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


def test_a_stopped_run_says_how_far_it_got_not_a_time_left() -> None:
    clock = SimClock()
    ui = RunConsole(plain_console()[0], clock=clock)
    ui.start(plan_len=4, estimate_s=400, per_step_s=[100.0] * 4)
    ui.step(1, "a")
    clock.sleep(100)
    ui.step(2, "b")
    clock.sleep(50)
    ui.state("aborted", "operator signal SIGINT")
    # 150 s of a 400 s plan that ran as estimated: 37.5 %, shown rounded to 38 %
    assert ui.progress_text() == "38% done, stopped after 0:02:30 (simulated)"
