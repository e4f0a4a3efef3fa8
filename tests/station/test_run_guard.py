"""Safety at the point of use, the folded plan of `check`, and `--version` (in process).

The real station is the README's example lab station with every instrument pointed at a
loopback port nothing listens on (and a TIFF folder for a camera), so nothing can move and no
network beyond this machine is touched. Standard input under pytest is not a terminal, so a run
without --yes must be refused after the cautions are shown.
"""

from __future__ import annotations

import json
import re
import socket
from pathlib import Path

import numpy as np
import pytest
import tifffile

from station import __version__
from station.cli import exitcodes
from station.cli.main import main
from station.cli.run_guard import plan_envelope
from station.inputs.config import BUILTIN_DIR

REPO = Path(__file__).resolve().parents[2]
DEMO_UUT = BUILTIN_DIR / "demo_uut.yaml"


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def loopback_lab_station(folder: Path) -> Path:
    """The example lab station, its instruments on loopback ports nothing listens on."""
    text = (BUILTIN_DIR / "example_lab_station.yaml").read_text(encoding="utf-8")
    text = re.sub(r"resource: (TCPIP::\S+|ASRL\S+|GPIB\S+)",
                  lambda _m: f"resource: TCPIP::127.0.0.1::{_free_port()}::SOCKET", text)
    text = re.sub(r"recovery: \{[^}]*\}", "recovery: {retries: 0}", text)
    text = re.sub(r"timeout_s: [0-9.]+", "timeout_s: 0.3", text)
    replay = folder / "replay"
    replay.mkdir(exist_ok=True)
    tifffile.imwrite(replay / "f001.tif", np.zeros((512, 640), np.uint16))
    text = text.replace("driver: video-capture", "driver: tiff-replay")
    text = text.replace("resource: device:0", f'resource: "replay:{replay}"')
    resources = re.findall(r"resource: (\S+)", text)
    assert len(resources) == 4 and all("127.0.0.1" in r or "replay:" in r for r in resources)
    path = folder / "lab_station.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def test_version(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as info:
        main(["--version"])
    assert info.value.code == 0
    # the version the package metadata declares (pyproject.toml)
    pyproject = (REPO / "pyproject.toml").read_text(encoding="utf-8")
    declared = re.search(r'^version = "([^"]+)"', pyproject, re.MULTILINE).group(1)
    assert capsys.readouterr().out.strip() == f"nightbench {__version__}" == f"nightbench {declared}"


def test_real_station_without_uut_is_refused(tmp_path: Path, capsys) -> None:
    station = loopback_lab_station(tmp_path)
    code = main(["run", "distortion-grid", "--station", str(station), "--runs",
                 str(tmp_path / "runs")])
    assert code == exitcodes.INVALID
    assert "needs the UUT file" in capsys.readouterr().out
    assert not (tmp_path / "runs").exists()


def test_real_station_shows_cautions_and_refuses_without_yes_off_a_terminal(
        tmp_path: Path, capsys) -> None:
    station = loopback_lab_station(tmp_path)
    code = main(["run", "distortion-scan", "--station", str(station), "--uut", str(DEMO_UUT),
                 "--runs", str(tmp_path / "runs")])
    out = capsys.readouterr().out
    assert code == exitcodes.INVALID
    assert "REAL BENCH: Larkspur lab, bay 2 collimator bench" in out
    # distortion-scan: +30 K above the plate; the safe setpoint (23 C) stands for the plate
    assert "planned maximum source temperature: +30.0 K above the reference plate (about 53 C" \
        in out
    assert "CAUTION hot surface" in out and "CAUTION moving parts" in out
    assert "lab's rules" in out
    assert "refused: nobody can confirm the start (standard input is not a terminal)" in out
    assert not (tmp_path / "runs").exists()  # no run folder, nothing opened


def test_stage_envelope_covers_every_move_and_park(tmp_path: Path) -> None:
    from station.engine.runner import load_inputs

    station = loopback_lab_station(tmp_path)
    inputs = load_inputs("distortion-scan", station_path=station, uut_path=DEMO_UUT,
                         overrides={})
    env = plan_envelope(inputs.plan.steps, inputs.station)
    moves = [s.position for s in inputs.plan.steps if s.kind == "move"]
    for axis, (lo, hi, unit) in env.axes.items():
        values = [m[axis] for m in moves if axis in m] + [0.0]  # park of both axes is 0
        assert (lo, hi, unit) == (min(values), max(values), "deg")
    assert env.max_difference_k == 30.0 and env.max_absolute_c is None


def test_unattended_start_is_recorded_and_an_unreachable_bench_exits_4(
        tmp_path: Path, capsys) -> None:
    station = loopback_lab_station(tmp_path)
    runs = tmp_path / "runs"
    code = main(["run", "distortion-grid", "--station", str(station), "--uut", str(DEMO_UUT),
                 "--runs", str(runs), "--yes", "--plain"])
    out = capsys.readouterr().out
    assert code == exitcodes.INSTRUMENT, out  # as `bench` exits when an instrument is silent
    (folder,) = [p for p in runs.iterdir() if p.is_dir()]  # beside it: the history file
    manifest = json.loads((folder / "manifest.json").read_text())
    assert manifest["start_confirmation"].startswith("--yes: unattended start")
    assert manifest["state"] == "faulted"
    # what safing did is told, and that the source may still be hot
    assert "blackbody: NOT SAFED" in out and "stage: NOT PARKED" in out
    assert "The source may still be hot" in out


def test_check_folds_loops_and_full_lists_every_step(capsys) -> None:
    assert main(["check", "distortion-scan", "--no-connect"]) == exitcodes.OK
    folded = capsys.readouterr().out
    assert main(["check", "distortion-scan", "--no-connect", "--full"]) == exitcodes.OK
    full = capsys.readouterr().out
    from station.engine.runner import load_inputs

    inputs = load_inputs("distortion-scan", station_path=None, uut_path=None, overrides={})
    steps = len(inputs.plan.steps)
    scans = sum(1 for s in inputs.plan.steps if s.kind == "move" and ".scan[" in s.id)
    assert steps > 100 and scans > 30
    # folded: one line per step of the recipe, the scan's move shown once with its count
    assert len(folded.splitlines()) < 20
    move = next(line for line in folded.splitlines() if ".scan[1.." in line and " move " in line)
    assert f".scan[1..{scans}].move" in move and f" {scans} " in move
    # full: one line per step of the plan (plus title, header, rule and the two summary lines)
    numbered = [line for line in full.splitlines() if re.match(r"^\d+\s+s\d", line)]
    assert len(numbered) == steps
    assert "{" not in folded and "{" not in full  # no Python syntax
