"""The live screen as an operator sees it: a real `nightbench run` in a pseudo-terminal.

A paced simulated run (`--realtime 200`: 5 simulated minutes in 1.5 s) is read through a
pseudo-terminal (pexpect), so rich draws its live display exactly as on a bench terminal. Every
frame's progress line is read from the byte stream in order; the final screen is rebuilt with a
VT100 emulator (pyte) and printed, a text screenshot (`pytest -rP` shows it).

Checked: the time left never rises (the plan's waits run as estimated), elapsed + left stays the
plan's total within one step's estimate, the time left reaches zero, and the final screen shows
100 % and the total. A second test answers the real-station confirmation at the terminal.
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

import pytest

pexpect = pytest.importorskip("pexpect")
pyte = pytest.importorskip("pyte")

COLUMNS, ROWS = 110, 60  # tall: the final frame stays on screen above the results and report lines
SPEED = 200.0
WAIT_S = 60.0
RECIPE = f"""\
recipe: paced-screen
description: five waits the screen counts down through
steps:
  - note: paced run for the terminal test
  - wait: {WAIT_S}
  - wait: {WAIT_S}
  - wait: {WAIT_S}
  - wait: {WAIT_S}
  - wait: {WAIT_S}
  - note: done
"""
ANSI = re.compile(rb"\x1b\[[0-9;?]*[A-Za-z]|\x1b[()][A-Za-z0-9]|\r")
PROGRESS = re.compile(r"(\d+)%, elapsed (\d+):(\d\d):(\d\d), about (\d+):(\d\d):(\d\d) left "
                      r"\(simulated\)")
TOTAL = re.compile(r"100%, total (\d+):(\d\d):(\d\d) \(simulated\)")


def seconds(h: str, m: str, s: str) -> int:
    return int(h) * 3600 + int(m) * 60 + int(s)


def spawn(args: list[str], cwd: Path):
    env = {"TERM": "xterm-256color", "COLUMNS": str(COLUMNS), "LINES": str(ROWS),
           "PATH": "/usr/bin:/bin", "PYTHONPATH": str(Path(__file__).resolve().parents[2])}
    return pexpect.spawn(sys.executable, ["-m", "station", *args], cwd=str(cwd), env=env,
                         dimensions=(ROWS, COLUMNS), timeout=60)


def screenshot(raw: bytes) -> list[str]:
    screen = pyte.Screen(COLUMNS, ROWS)
    stream = pyte.ByteStream(screen)
    stream.feed(raw)
    return [line.rstrip() for line in screen.display]


def test_paced_run_counts_down_to_zero_and_ends_at_100_percent(tmp_path: Path) -> None:
    recipe = tmp_path / "paced.yaml"
    recipe.write_text(RECIPE, encoding="utf-8")
    child = spawn(["run", str(recipe), "--runs", str(tmp_path / "runs"),
                   "--realtime", str(SPEED)], tmp_path)
    child.expect(pexpect.EOF)
    raw = child.before
    child.close()
    shot = screenshot(raw)
    print("\n".join(["final screen (text capture):", "+" + "-" * COLUMNS + "+"]
                    + [f"|{line:<{COLUMNS}}|" for line in shot] + ["+" + "-" * COLUMNS + "+"]))
    assert child.exitstatus == 0, raw.decode(errors="replace")[-2000:]

    text = ANSI.sub(b"", raw).decode("utf-8", errors="replace")
    samples = [(int(m.group(1)), seconds(*m.group(2, 3, 4)), seconds(*m.group(5, 6, 7)))
               for m in PROGRESS.finditer(text)]
    print("frames read (percent, elapsed s, left s):", samples)
    assert len(samples) >= 4, text[-2000:]  # the display refreshed while the run went on
    plan_total = 5 * WAIT_S
    for (_, _, left_a), (_, elapsed_b, left_b) in zip(samples, samples[1:]):
        assert left_b <= left_a + 1  # never rises (1 s: display rounding)
        # elapsed + left is the plan's total within one step's estimate (a wait of 60 s)
        assert abs(elapsed_b + left_b - plan_total) <= WAIT_S + 1
    assert samples[-1][2] <= WAIT_S  # the last frames before the end are in the last step

    screen = "\n".join(shot)
    total = TOTAL.search(screen)
    assert total is not None, screen
    # five 60 s waits plus the target-free notes: 300 s of simulated time (polls land on it)
    assert abs(seconds(*total.groups()) - plan_total) <= 2
    assert "COMPLETE" in screen and "step 7/7" in screen
    assert "{" not in screen  # no Python syntax on screen


def test_real_station_asks_before_anything_moves(tmp_path: Path, lab_station: Path) -> None:
    runs = tmp_path / "runs"
    child = spawn(["run", "distortion-grid", "--station", str(lab_station), "--uut",
                   str(DEMO_UUT), "--runs", str(runs)], tmp_path)
    child.expect("planned maximum source temperature: ([^\r\n]+)")
    assert b"+30.0 K above the reference plate" in child.match.group(1)
    child.expect("CAUTION hot surface")
    child.expect("CAUTION moving parts")
    child.expect("Type 'yes' to start: ")
    child.sendline("no")
    child.expect("not started: the operator did not confirm")
    child.expect(pexpect.EOF)
    child.close()
    assert child.exitstatus == 2
    assert not runs.exists() or not any(runs.iterdir())  # nothing was created, nothing moved


REPO = Path(__file__).resolve().parents[2]
DEMO_UUT = REPO / "station" / "data" / "demo_uut.yaml"


@pytest.fixture
def lab_station(tmp_path: Path) -> Path:
    from tests.station.test_run_guard import loopback_lab_station

    return loopback_lab_station(tmp_path)
