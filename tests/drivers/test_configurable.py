"""Configurable (station-file) SCPI-style drivers against the bench simulators over real sockets.

Everything the drivers know comes from tests/drivers/data/configurable_station.yaml.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
import yaml

from drivers.clock import SimClock
from drivers.configurable import ConfigurableBlackbody, ConfigurableStage, ConfigurableWheel
from drivers.errors import LimitError
from drivers.registry import find_driver
from drivers.testkit import run_contract
from drivers.transport import open_transport
from simulators.bench import SimBench
from simulators.servers import BenchServers, start_bench_servers

DATA = Path(__file__).parent / "data"
STATION = DATA / "configurable_station.yaml"
RECIPE = DATA / "settle_recipe.yaml"
COMMON = {"driver", "resource", "timeout_s", "recovery"}

# Simulated bench physics, from the station file's simulation section.
SECONDS_PER_SLOT = 1.5
VELOCITY, ACCELERATION = 10.0, 20.0


def settings_of(role: str) -> dict[str, Any]:
    doc = yaml.safe_load(STATION.read_text(encoding="utf-8"))
    return {k: v for k, v in doc["instruments"][role].items() if k not in COMMON}


def trapezoid_s(distance: float, v: float = VELOCITY, a: float = ACCELERATION) -> float:
    """Move time of a trapezoidal velocity profile (kinematics: d/v + v/a, or 2 sqrt(d/a) when
    the axis never reaches full speed)."""
    d = abs(distance)
    return d / v + v / a if d >= v * v / a else 2.0 * math.sqrt(d / a)


@pytest.fixture
def simbench() -> Iterator[tuple[SimClock, SimBench, BenchServers]]:
    clock = SimClock()
    doc = yaml.safe_load(STATION.read_text(encoding="utf-8"))
    bench = SimBench.from_mapping(doc["simulation"]["bench"], clock, seed=5)
    with start_bench_servers(bench) as servers:
        yield clock, bench, servers


def test_registry_finds_the_configurable_drivers_by_their_station_names() -> None:
    assert find_driver("scpi-configurable-blackbody") is ConfigurableBlackbody
    assert find_driver("scpi-configurable-wheel") is ConfigurableWheel
    assert find_driver("scpi-configurable-stage") is ConfigurableStage


@pytest.mark.parametrize("role,cls", [("blackbody", ConfigurableBlackbody),
                                      ("wheel", ConfigurableWheel),
                                      ("stage", ConfigurableStage)])
def test_contract_passes_over_sockets_with_yaml_only_configuration(simbench, role, cls) -> None:
    clock, bench, servers = simbench
    style = "serial" if role == "wheel" else "visa"
    with open_transport(servers.resource(role, style), instrument=role, clock=clock) as link:
        driver = cls(link, name=role, settings=settings_of(role))
        report = run_contract(driver, clock)
    report.raise_if_failed()
    details = {c.name: c.detail for c in report.checks}
    if role == "wheel":
        # one slot of travel takes seconds_per_slot of simulated time (simulator physics);
        # the contract polls every 0.25 s, so the measured time is within one poll
        waited = float(details["select slot 2"].split("after ")[1].split(" s")[0])
        assert waited == pytest.approx(SECONDS_PER_SLOT, abs=0.25)
    if role == "stage":
        # targets at 3/4 of each range: az 20 deg, el 15 deg; slowest axis decides
        waited = float(details["move_to reaches targets"].split("after ")[1].split(" s")[0])
        assert waited == pytest.approx(trapezoid_s(20.0), abs=0.1 + 1e-9)
    if role == "blackbody":
        # settled within 0.05 K (the contract's tolerance; bench blackbodies are specified to
        # a few mK of stability, common practice) and left at safe_c
        assert bench.blackbody.setpoint_value == pytest.approx(22.0, abs=1e-3)


def test_limits_refused_before_anything_is_sent(simbench) -> None:
    clock, bench, servers = simbench
    events: list[dict[str, Any]] = []
    with open_transport(servers.resource("blackbody"), instrument="blackbody", clock=clock,
                        events=events.append) as link:
        bb = ConfigurableBlackbody(link, name="blackbody", settings=settings_of("blackbody"))
        with pytest.raises(LimitError, match="100.0 C"):
            bb.set_temperature(150.0)
        with pytest.raises(LimitError, match="60.0 K"):
            bb.set_difference(75.0)
    assert [e for e in events if e["type"] == "io"] == []


def test_templates_format_values_as_written(simbench) -> None:
    clock, bench, servers = simbench
    events: list[dict[str, Any]] = []
    with open_transport(servers.resource("blackbody"), instrument="blackbody", clock=clock,
                        events=events.append) as link:
        bb = ConfigurableBlackbody(link, name="blackbody", settings=settings_of("blackbody"))
        bb.set_temperature(31.23456)
        assert bb.setpoint() == pytest.approx(31.235, abs=1e-9)  # {value:.3f}: 31.23456 -> 31.235
        assert bb.last_error() == (0, "No error")
    assert [e["command"] for e in events if e["type"] == "io"][0] == "SOUR:TEMP 31.235"


def test_full_recipe_through_the_station_uses_the_yaml_templates(tmp_path: Path) -> None:
    from station.cli.main import main

    code = main(["run", str(RECIPE), "--station", str(STATION), "--runs", str(tmp_path),
                 "--plain"])
    assert code == 0
    (run,) = [p for p in tmp_path.iterdir() if p.is_dir()]  # the history file lies beside
    events = [json.loads(line) for line in (run / "events.jsonl").read_text().splitlines()]
    sent = {e["command"] for e in events if e["type"] == "io"}
    # the settings go out exactly as the templates format them (3 decimals, not the built-in 4)
    assert {"SOUR:MODE ABS", "SOUR:TEMP 30.000", "SOUR:MODE DIFF", "SOUR:DIFF 5.000",
            "WHL:POS 2", "MOVE az 10.0000", "MOVE el -5.0000"} <= sent
    settled = [e for e in events if e["type"] == "blackbody.settled"]
    assert [s["mode"] for s in settled] == ["absolute", "difference"]
    for s in settled:  # within the recipe's tolerance of 0.05 K
        assert abs(s["reading"] - s["setpoint"]) <= 0.05
    steps = {e["step"]: e["t"] for e in events if e["type"] == "step.start"}
    done = {e["step"]: e["t"] for e in events if e["type"] == "step.done"}
    # wheel: one slot of travel; stage: az 10 deg (full trapezoid) decides over el 5 deg
    assert done["s3.target"] - steps["s3.target"] == pytest.approx(SECONDS_PER_SLOT, abs=0.25)
    assert done["s4.move"] - steps["s4.move"] == pytest.approx(
        max(trapezoid_s(10.0), trapezoid_s(5.0)), abs=0.25)
    final = [e for e in events if e["type"] == "state"][-1]
    assert final["dest"] == "complete"
