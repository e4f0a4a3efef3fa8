"""The station file: every problem reported at once with file, line and the fix; bench check."""

from __future__ import annotations

import shutil
import socket
import subprocess
import sys
from pathlib import Path

import pytest

from sequences.yamlsource import SourceError
from station.inputs.config import BUILTIN_DIR, DEFAULT_SIM_STATION, load_station

BAD_STATION = """\
station: Broken bench
collimator:
  focal_length_mm: 800
instruments:
  blackbody:
    driver: scpi-blackbodee
    resource: TCPIP::10.0.0.5::5025::SOCKET
    limits: {min_c: 5, max_c: 100, min_difference_k: -10}
    safe_c: 22
  wheel:
    driver: scpi-wheel
    resource: FOO::BAR
    slots:
      1: {name: open, target: {kind: open_aperture}}
      2: {name: grid, target: {kind: pinhole_grd}}
  stage:
    driver: scpi-stage
    resource: GPIB0::7::INSTR
    axes:
      az: {min: 30, max: -30}
  camera:
    driver: video-capture
    resource: device:0
"""


def _problems(tmp_path: Path, text: str) -> list[str]:
    path = tmp_path / "station.yaml"
    path.write_text(text)
    with pytest.raises(SourceError) as info:
        load_station(path)
    return [str(p) for p in info.value.problems]


def test_builtin_simulated_station_gives_the_recipe_facts():
    station = load_station(None)
    assert station.simulated
    facts = station.facts(frozenset({"distortion"}))
    assert {"pinhole_grid", "pinhole", "open"} <= facts.targets
    assert facts.limits.difference_k == (-20.0, 60.0)
    assert facts.limits.axes["az"].minimum == -40.0 and facts.limits.axes["az"].maximum == 40.0
    assert facts.stage_axes["az"] == "deg"
    assert station.collimator_focal_mm == 500.0


def test_example_lab_station_loads_serial_gpib_and_lan_resources():
    station = load_station(BUILTIN_DIR / "example_lab_station.yaml")
    assert not station.simulated
    resources = {r: e.resource for r, e in station.instruments.items()}
    assert resources["blackbody"].startswith("TCPIP::")
    assert resources["wheel"].startswith("ASRL")
    assert resources["stage"].startswith("GPIB0::")


def test_every_problem_is_reported_with_its_line(tmp_path):
    problems = _problems(tmp_path, BAD_STATION)
    text = "\n".join(problems)
    # unknown driver, with the nearest known name suggested (line 6)
    assert any(":6:" in p and "unknown driver 'scpi-blackbodee'" in p and "scpi-blackbody" in p
               for p in problems), text
    # missing limit (limits mapping on line 8)
    assert any(":8:" in p and "missing 'max_difference_k'" in p for p in problems), text
    # a resource string no transport understands (line 12)
    assert any(":12:" in p and "not a resource string" in p for p in problems), text
    # a target kind that does not exist (line 15)
    assert any(":15:" in p and "pinhole_grd" in p for p in problems), text
    # soft limits the wrong way round (line 20)
    assert any(":20:" in p and "must be above min" in p for p in problems), text
    assert len(problems) >= 5


def test_sim_resource_refused_on_a_real_station(tmp_path):
    text = BAD_STATION.replace("resource: GPIB0::7::INSTR", "resource: sim+visa")
    problems = _problems(tmp_path, text)
    assert any("names the built-in simulator" in p and ":18:" in p for p in problems)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_bench_command_names_the_instrument_that_does_not_answer(tmp_path):
    # A station whose blackbody points at a closed loopback port: `nightbench bench` must exit 4
    # and name the blackbody, not print a traceback.
    station = tmp_path / "station.yaml"
    text = DEFAULT_SIM_STATION.read_text().replace(
        "    driver: scpi-blackbody\n    resource: sim+local",
        f"    driver: scpi-blackbody\n    resource: TCPIP::127.0.0.1::{_free_port()}::SOCKET")
    station.write_text(text)
    shutil.copy(BUILTIN_DIR / "demo_camera_truth.yaml", tmp_path)
    result = subprocess.run([sys.executable, "-m", "station", "bench", "--station", str(station)],
                            capture_output=True, text=True, timeout=120)
    assert result.returncode == 4, result.stdout + result.stderr
    assert "blackbody" in result.stdout
    assert "Traceback" not in result.stdout + result.stderr


def test_bench_command_on_the_simulated_bench_lists_every_instrument():
    result = subprocess.run([sys.executable, "-m", "station", "bench"], capture_output=True,
                            text=True, timeout=120)
    assert result.returncode == 0, result.stdout + result.stderr
    for role in ("blackbody", "wheel", "stage", "camera"):
        assert role in result.stdout


@pytest.mark.parametrize("old,new,message", [
    ("acceleration: 20.0, start: 0.0}", "acceleration: 20.0, start: .inf}",
     "'start' must be a finite number"),
    ("velocity: 10.0, acceleration: 20.0, start: 0.0}\n        el",
     "velocity: 0, acceleration: 20.0, start: 0.0}\n        el",
     "'velocity' must be a positive finite number"),
])
def test_simulated_timing_that_would_make_the_estimate_infinite_is_refused_with_its_line(
        tmp_path, capsys, old, new, message):
    """Found by the input fuzzer: an infinite stage start once crashed the duration estimate."""
    from station.cli.main import main

    text = DEFAULT_SIM_STATION.read_text()
    assert old in text
    station = tmp_path / "station.yaml"
    station.write_text(text.replace(old, new, 1))
    shutil.copy(BUILTIN_DIR / "demo_camera_truth.yaml", tmp_path)
    line = next(i for i, row in enumerate(station.read_text().splitlines(), 1)
                if new.split("\n")[0] in row)
    assert main(["check", "distortion-grid", "--station", str(station)]) == 2
    out = " ".join(capsys.readouterr().out.split())
    assert f"station.yaml:{line}:" in out and message in out
