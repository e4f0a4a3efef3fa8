"""The invented TB-7 blackbody (tests/drivers/invented_blackbody.py and
tests/drivers/data/invented_station.yaml) through the station: `check`, `bench` and a
two-temperature recipe with the instrument on a real socket in a station that mixes it with
simulated ones (so on real time), for both journeys.
"""

from __future__ import annotations

import time
from pathlib import Path

import pytest
import yaml

STATION = Path(__file__).parent / "data" / "invented_station.yaml"

def register_python_driver(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> str:
    """Register InventedBlackbody as `tb7-blackbody` the way a lab's package would (an entry
    point in the `nightbench.drivers` group), without installing anything."""
    info = tmp_path / "site" / "lab_tb7-1.0.dist-info"
    info.mkdir(parents=True)
    (info / "METADATA").write_text("Metadata-Version: 2.1\nName: lab_tb7\nVersion: 1.0\n")
    (info / "entry_points.txt").write_text(
        "[nightbench.drivers]\ntb7-blackbody = tests.drivers.invented_blackbody:InventedBlackbody\n")
    monkeypatch.syspath_prepend(str(tmp_path / "site"))
    return "tb7-blackbody"


def mixed_station(tmp_path: Path, port: int, driver: str | None = None) -> Path:
    """The built-in simulated station with its blackbody replaced by the real-socket TB-7:
    described by the station file alone, or by naming the Python driver. A station that mixes
    real and simulated instruments."""
    from station.inputs.config import BUILTIN_DIR

    doc = yaml.safe_load((BUILTIN_DIR / "sim_station.yaml").read_text(encoding="utf-8"))
    entry = yaml.safe_load(STATION.read_text(encoding="utf-8"))["instruments"]["blackbody"]
    if driver is not None:  # a Python driver takes only the kind's settings
        entry = {"driver": driver, **{k: entry[k] for k in ("timeout_s", "limits", "safe_c")}}
    doc["instruments"]["blackbody"] = {**entry, "resource": f"socket://127.0.0.1:{port}"}
    doc["simulation"]["camera_truth"] = str(BUILTIN_DIR / "demo_camera_truth.yaml")
    path = tmp_path / "mixed_station.yaml"
    path.write_text(yaml.safe_dump(doc, sort_keys=False), encoding="utf-8")
    return path


@pytest.mark.parametrize("journey", ["station-file", "python"])
def test_check_bench_and_a_two_temperature_recipe_through_the_station(
        fake, tmp_path: Path, capsys: pytest.CaptureFixture[str],
        monkeypatch: pytest.MonkeyPatch, journey: str) -> None:
    import json

    from station.cli.main import main

    clock, bench, server, late = fake
    driver = register_python_driver(tmp_path, monkeypatch) if journey == "python" else None
    station = mixed_station(tmp_path, server.port, driver)
    recipe = tmp_path / "two_temperatures.yaml"
    recipe.write_text("recipe: two-temperatures\ndescription: 30 C then 35 C\nsteps:\n"
                      "  - blackbody: {mode: absolute, value: 30.0, tolerance: 0.05, hold: 0.3, "
                      "timeout: 20}\n"
                      "  - blackbody: {mode: absolute, value: 35.0, tolerance: 0.05, hold: 0.3, "
                      "timeout: 20}\n", encoding="utf-8")
    assert main(["check", str(recipe), "--station", str(station)]) == 0
    out = " ".join(capsys.readouterr().out.split())  # undo the console's line wrapping
    assert "this station mixes real (blackbody) and simulated (wheel, stage, camera)" in out
    assert "blackbody: Invented Lab,TB-7" in out
    if journey == "station-file":  # check asks every query bench asks; once is enough
        assert main(["bench", "--station", str(station)]) == 0
    runs = tmp_path / "runs"
    assert main(["run", str(recipe), "--station", str(station), "--runs", str(runs),
                 "--plain"]) == 0
    assert "this station mixes real (blackbody)" in " ".join(capsys.readouterr().out.split())
    (run,) = [p for p in runs.iterdir() if p.is_dir()]  # the history file lies beside
    events = [json.loads(x) for x in (run / "events.jsonl").read_text().splitlines()]
    settled = [e for e in events if e["type"] == "blackbody.settled"]
    assert [s["setpoint"] for s in settled] == [30.0, 35.0]
    for s in settled:  # within the recipe's tolerance
        assert abs(s["reading"] - s["setpoint"]) <= 0.05
    sent = [e["command"] for e in events if e["type"] == "io" and e["instrument"] == "blackbody"]
    assert "T.SET 30.00" in sent and "T.SET 35.00" in sent and "T.STABLE?" in sent
    # real time: the run's clock is the wall clock (within a minute of now), not the
    # simulated epoch of 2026-01-01
    assert abs(events[-1]["t"] - time.time()) < 60.0
