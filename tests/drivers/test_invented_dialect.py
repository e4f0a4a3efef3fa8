"""An invented-dialect blackbody (CR+LF, WHO?, T.SET, T.NOW?, T.STABLE? answered YES/NO, bare
`ERR <code>` refusals, a fifth of the replies 200 ms late) driven two ways: by the station-file
driver (tests/drivers/data/invented_station.yaml) and by a Python declaration
(tests/drivers/invented_blackbody.py). Both through a scripted conversation, and both over a real
socket on real time against the bench simulator speaking the Python declaration's dialect; and
the station-file dialect dry-run on the simulated bench. Through the station on real time:
test_invented_station.py.
"""

from __future__ import annotations

import math
import time
from pathlib import Path
from typing import Any

import pytest
import yaml

from drivers.configurable import ConfigurableBlackbody
from drivers.errors import InstrumentRefused
from drivers.interfaces import Blackbody
from drivers.protocol import command_table
from drivers.testkit import Script, ScriptedTransport
from drivers.transport import open_transport
from tests.drivers.conftest import BAND_K, HOLD_S, TAU_S
from tests.drivers.invented_blackbody import InventedBlackbody

STATION = Path(__file__).parent / "data" / "invented_station.yaml"
COMMON = {"driver", "resource", "timeout_s", "recovery"}


def yaml_settings() -> dict[str, Any]:
    entry = yaml.safe_load(STATION.read_text(encoding="utf-8"))["instruments"]["blackbody"]
    return {k: v for k, v in entry.items() if k not in COMMON}


SETTINGS = {k: v for k, v in yaml_settings().items()
            if k in ("limits", "safe_c")}  # a Python driver needs only the kind's settings


def station_file_driver(link: Any) -> Blackbody:
    return ConfigurableBlackbody(link, name="blackbody", settings=yaml_settings())


def python_driver(link: Any) -> Blackbody:
    return InventedBlackbody(link, name="blackbody", settings=SETTINGS)


BUILDERS = pytest.mark.parametrize("build", [station_file_driver, python_driver],
                                   ids=["station-file", "python"])

# The manual's conversation: a setpoint, readings, the stability flag in words, a refusal
# without a message and the safing path.
CONVERSATION = Script.parse("""
    > WHO?
    < Invented Lab,TB-7,0042,2.1
    > T.SET 30.00
    < OK
    > T.NOW?
    < 29.874
    > T.STABLE?
    < NO
    > T.STABLE?
    < YES
    > T.REL 5.00
    < ERR 12
    > T.ERR?
    < 12
    > T.MODE ABS
    < OK
    > T.SET 22.00
    < OK
""")


@BUILDERS
def test_scripted_conversation_in_the_invented_dialect(build) -> None:
    with ScriptedTransport(CONVERSATION, instrument="blackbody") as link:
        bb = build(link)
        assert (link.read_termination, link.write_termination) == ("\r\n", "\r\n")
        assert bb.identify() == "Invented Lab,TB-7,0042,2.1"
        bb.set_temperature(30.0)
        assert bb.temperature() == 29.874
        assert bb.is_stable() is False and bb.is_stable() is True
        with pytest.raises(InstrumentRefused) as err:
            bb.set_difference(5.0)
        assert str(err.value) == ("blackbody: refused (error 12); command 'T.REL 5.00'; "
                                  "reply 'ERR 12'")
        assert bb.last_error() == (12, "")
        bb.go_safe()


def test_both_journeys_declare_the_same_table() -> None:
    """The station file and the Python declaration describe one instrument: same commands."""
    yaml_driver = station_file_driver(None)
    py = python_driver(None)
    rows = {(c.header, c.args) for c in command_table(py.commands, py.dialect)}
    assert rows == {(c.header, c.args) for c in command_table(yaml_driver.commands,
                                                              yaml_driver.dialect)}
    assert yaml_driver.dialect.true_words == py.dialect.true_words == ("YES",)


@BUILDERS
def test_two_temperatures_over_a_socket_on_real_time(fake, build) -> None:
    clock, bench, server, late = fake
    events: list[dict[str, Any]] = []
    with open_transport(f"socket://127.0.0.1:{server.port}", instrument="blackbody",
                        clock=clock, timeout_s=1.0, events=events.append) as link:
        bb = build(link)
        assert bb.identify().startswith("Invented Lab,TB-7")
        for target in (30.0, 35.0):
            start_c = bb.temperature()
            bb.set_temperature(target)
            t0 = clock.now()
            while not bb.is_stable():
                assert clock.now() - t0 < 5.0, "did not settle in 5 s"
                clock.sleep(0.05)
            waited = clock.now() - t0
            # First-order step (closed form): |e| = e0 exp(-t/tau) enters the band at
            # tau ln(e0/band), then must stay there for the hold time.
            assert waited >= TAU_S * math.log(abs(target - start_c) / BAND_K) + HOLD_S - 0.02
            assert bb.temperature() == pytest.approx(target, abs=BAND_K)
            assert bb.setpoint() == pytest.approx(target, abs=0.005)  # sent with 2 decimals
        bb.go_safe()
        assert bb.mode() == "absolute" and bb.setpoint() == pytest.approx(22.0, abs=0.005)
    assert late.late >= 1                                     # some replies were late...
    assert [e for e in events if e["type"].startswith("transport.")] == []  # ...none retried
    sent = [e["command"] for e in events if e["type"] == "io"]
    assert "T.SET 30.00" in sent and "T.SET 35.00" in sent


def test_a_station_file_dialect_dry_runs_on_the_simulated_bench(tmp_path: Path) -> None:
    """Before the instrument arrives: the simulated blackbody speaks the station file's own
    dialect (CR+LF, T.SET, YES/NO), in simulated time."""
    import json

    from station.cli.main import main
    from station.inputs.config import BUILTIN_DIR

    doc = yaml.safe_load((BUILTIN_DIR / "sim_station.yaml").read_text(encoding="utf-8"))
    entry = yaml.safe_load(STATION.read_text(encoding="utf-8"))["instruments"]["blackbody"]
    doc["instruments"]["blackbody"] = {**entry, "resource": "sim+serial"}
    doc["simulation"]["camera_truth"] = str(BUILTIN_DIR / "demo_camera_truth.yaml")
    station = tmp_path / "station.yaml"
    station.write_text(yaml.safe_dump(doc, sort_keys=False), encoding="utf-8")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text("recipe: one-temperature\ndescription: 30 C\nsteps:\n"
                      "  - blackbody: {mode: absolute, value: 30.0, tolerance: 0.05, hold: 10, "
                      "timeout: 900}\n", encoding="utf-8")
    runs = tmp_path / "runs"
    assert main(["run", str(recipe), "--station", str(station), "--runs", str(runs),
                 "--plain"]) == 0
    (run,) = [p for p in runs.iterdir() if p.is_dir()]  # the history file lies beside
    events = [json.loads(x) for x in (run / "events.jsonl").read_text().splitlines()]
    io = [(e["command"], e["reply"]) for e in events
          if e["type"] == "io" and e["instrument"] == "blackbody"]
    assert ("T.SET 30.00", "OK") in io and ("T.MODE?", "ABS") in io
    (settled,) = [e for e in events if e["type"] == "blackbody.settled"]
    # Simulated source (sim_station.yaml): tau 60 s, slew 0.1 K/s, 2 mK noise, from 22 C.
    # The 8 K step slews until the error is r tau = 6 K ((8 - 6)/0.1 = 20 s), then decays as
    # 6 exp(-t/60) into the recipe's 0.05 K (closed form), then holds 10 s; readings are polled
    # each second, and 4 sigma of noise (8 mK) may move the entry either way.
    start = next(e["t"] for e in events if e["type"] == "step.start")
    took = settled["t"] - start
    assert 20.0 + 60.0 * math.log(6.0 / 0.058) + 10.0 <= took
    assert took <= 20.0 + 60.0 * math.log(6.0 / 0.042) + 10.0 + 2.0
    assert abs(settled["reading"] - 30.0) <= 0.05
