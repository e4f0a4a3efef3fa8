"""The traps met adding an invented instrument, each pinned with the message the user now gets:
YAML turning words into booleans, reply patterns that can never match, a safing command with a
typo, timeouts that hide a wrong line ending, broken or misspelt plug-ins, raw dicts in the log,
the limits asked in one place, and the clock that follows the instruments."""

from __future__ import annotations

import logging
from importlib.metadata import distributions
from pathlib import Path
from typing import Any

import pytest
import yaml

from drivers.clock import PacedClock, RealClock, SimClock, choose_clock, mixed_station_note
from drivers.configurable import ConfigurableBlackbody
from drivers.declare import Dialect, PatternMismatch
from drivers.errors import InstrumentTimeout, LimitError
from drivers.recovery import RetryPolicy
from drivers.registry import list_drivers, misspelt_groups
from drivers.stage_scpi import ScpiStage
from drivers.testkit import ScriptedTransport
from drivers.transport import open_transport
from sequences.yamlsource import load_yaml
from simulators.bench import SimBench
from simulators.line_server import LineServer
from simulators.servers import BlackbodyProtocol
from tests.drivers.invented_blackbody import InventedBlackbody

STATION = Path(__file__).parent / "data" / "invented_station.yaml"
COMMON = {"driver", "resource", "timeout_s", "recovery"}
KIND_SETTINGS = {"limits": {"min_c": 5.0, "max_c": 90.0, "min_difference_k": -15.0,
                            "max_difference_k": 50.0}, "safe_c": 22.0}


def station_text(old: str = "", new: str = "") -> str:
    text = STATION.read_text(encoding="utf-8")
    assert old in text
    return text.replace(old, new) if old else text


def settings_of(text: str) -> dict[str, Any]:
    entry = yaml.safe_load(text)["instruments"]["blackbody"]
    return {k: v for k, v in entry.items() if k not in COMMON}


# --- YAML booleans and numbers -----------------------------------------------------------------

def test_unquoted_boolean_keys_and_words_are_errors_with_the_fix(tmp_path: Path) -> None:
    text = station_text('booleans: {"true": ["YES"], "false": ["NO"]}',
                        "booleans: {true: [YES], false: [NO]}")
    problems = ConfigurableBlackbody.validate_settings(settings_of(text))
    yaml_note = "(it does so for true/false, yes/no, on/off); quote it as the controller spells it"
    assert problems == [
        f"booleans.True: YAML read this unquoted key as the boolean True {yaml_note}: 'true'",
        f"booleans.True.0: YAML read this unquoted word as the boolean True {yaml_note}: 'YES'",
        f"booleans.False: YAML read this unquoted key as the boolean False {yaml_note}: 'false'",
        f"booleans.False.0: YAML read this unquoted word as the boolean False {yaml_note}: 'NO'",
    ]
    # the station loader places each problem on its file line (here: the booleans line)
    path = tmp_path / "station.yaml"
    path.write_text(text, encoding="utf-8")
    entry = load_yaml(path)["instruments"]["blackbody"]
    line = next(n for n, t in enumerate(text.splitlines(), 1) if t.strip().startswith("booleans"))
    assert entry.ref_of("booleans").line == line


def test_numbers_where_words_belong_are_errors_with_the_fix() -> None:
    text = station_text("modes: {absolute: ABS, difference: REL}", "modes: {absolute: 1, difference: 2}")
    problems = ConfigurableBlackbody.validate_settings(settings_of(text))
    assert problems[:2] == ["modes.absolute: YAML read this unquoted word as the number 1; "
                            "quote it: '1'",
                            "modes.difference: YAML read this unquoted word as the number 2; "
                            "quote it: '2'"]


def test_a_boolean_pattern_that_cannot_read_the_words_is_refused_at_load() -> None:
    text = station_text('stable: {query: "T.STABLE?"}',
                        'stable: {query: "T.STABLE?", reply: "(?P<value>[01])"}')
    assert ConfigurableBlackbody.validate_settings(settings_of(text)) == [
        "commands.stable.reply: can never match the word(s) YES, NO it must read; widen the "
        "pattern or fix the words"]


def test_a_message_less_error_reply_is_accepted() -> None:
    assert ConfigurableBlackbody.validate_settings(settings_of(station_text())) == []


# --- replies that can never parse --------------------------------------------------------------

def test_a_reply_the_pattern_cannot_match_is_not_retried() -> None:
    link = ScriptedTransport([("T.NOW?", "29.87 C")], instrument="blackbody",
                             policy=RetryPolicy(retries=3, backoff_s=0.0))
    bb = InventedBlackbody(link, name="blackbody", settings=KIND_SETTINGS)
    with pytest.raises(PatternMismatch) as err:
        bb.temperature()
    assert str(err.value).startswith(
        "blackbody: reply not understood: it does not match commands.temperature.reply")
    assert "not retried, the same question gets the same answer" in str(err.value)
    assert link.sent == ["T.NOW?"]  # asked once: a retry would have run off the script


def test_harmless_queries_are_identity_readbacks_and_status() -> None:
    bb = InventedBlackbody(None, name="blackbody", settings=KIND_SETTINGS)
    assert set(bb.harmless_queries()) == {"identify", "mode", "setpoint", "temperature",
                                          "reference_temperature", "stable"}
    stage = ScpiStage(None, name="stage", settings={"axes": {"az": {"min": -1, "max": 1}}})
    assert set(stage.harmless_queries()) == {"identify", "axis_list", "axis_limits az",
                                             "state az", "position az", "moving az"}


def test_check_asks_what_bench_asks_and_fails_the_same_way() -> None:
    script = [("WHO?", "Invented Lab,TB-7,0042,2.1"), ("T.MODE?", "ABS"), ("T.SET?", "22.00"),
              ("T.NOW?", "22.01"), ("T.AMB?", "21.9"), ("T.STABLE?", "MAYBE")]
    link = ScriptedTransport(script, instrument="blackbody")
    bb = InventedBlackbody(link, name="blackbody", settings=KIND_SETTINGS)
    failures = {}
    for label, ask in bb.harmless_queries().items():
        try:
            ask()
        except Exception as exc:
            failures[label] = str(exc)
    assert list(failures) == ["stable"]
    assert "reply 'MAYBE'" in failures["stable"]


# --- safing through a broken template ---------------------------------------------------------

def test_a_typo_in_the_safing_command_is_found_before_anything_moves() -> None:
    settings = settings_of(station_text('set_temperature: "T.SET {value:.2f}"',
                                        'set_temperature: "T.SETT {value:.2f}"'))
    assert ConfigurableBlackbody.validate_settings(settings) == []  # a well-formed template
    script = [("T.MODE?", "ABS"), ("T.MODE ABS", "OK"), ("T.SET?", "22.00"),
              ("T.SETT 22.00", "ERR 3")]
    with ScriptedTransport(script, instrument="blackbody") as link:
        bb = ConfigurableBlackbody(link, name="blackbody", settings=settings)
        assert bb.safing_problem() == ("the safing commands fail: blackbody: refused (error 3); "
                                       "command 'T.SETT 22.00'; reply 'ERR 3'")


def test_a_declared_safe_command_is_used_for_safing() -> None:
    settings = settings_of(station_text())
    settings["commands"]["go_safe"] = "T.STANDBY"
    with ScriptedTransport([("T.STANDBY", "OK")], instrument="blackbody") as link:
        ConfigurableBlackbody(link, name="blackbody", settings=settings).go_safe()


# --- errors that name their cause --------------------------------------------------------------

class LfBlackbody(InventedBlackbody):
    """The invented driver with the wrong write terminator (LF instead of CR+LF)."""

    DIALECT = Dialect(read_termination="\r\n", write_termination="\n",
                      error_reply="ERR {code}", true_words=("YES",), false_words=("NO",))


def _fake(reply_end: bytes) -> LineServer:
    bench = SimBench.from_mapping({"identity": {"blackbody": "Invented Lab,TB-7"}}, SimClock())
    return LineServer(BlackbodyProtocol(bench, driver=InventedBlackbody), name="tb7",
                      terminator=reply_end, line_end=b"\r\n")


def test_a_timeout_names_the_line_endings() -> None:
    with _fake(b"\r\n") as server, open_transport(
            f"socket://127.0.0.1:{server.port}", instrument="blackbody", clock=SimClock(),
            timeout_s=0.3, policy=RetryPolicy(retries=0)) as link:
        bb = LfBlackbody(link, name="blackbody", settings=KIND_SETTINGS)
        with pytest.raises(InstrumentTimeout) as err:
            bb.identify()
    assert str(err.value) == (
        "blackbody: no reply within 0.3 s (nothing received); command 'WHO?'. check the "
        f"instrument is on, socket://127.0.0.1:{server.port} is right, and the line endings: "
        "this link ends each command with '\\n' and reads up to '\\r\\n'")


@pytest.mark.parametrize("style", ["serial", "visa"])
def test_a_timeout_shows_the_bytes_that_did_arrive(style: str) -> None:
    with _fake(b"\r") as server:
        resource = (f"socket://127.0.0.1:{server.port}" if style == "serial"
                    else f"TCPIP::127.0.0.1::{server.port}::SOCKET")
        with open_transport(resource, instrument="blackbody", clock=SimClock(), timeout_s=0.3,
                            policy=RetryPolicy(retries=0)) as link:
            bb = InventedBlackbody(link, name="blackbody", settings=KIND_SETTINGS)
            link.timeout_s = 0.3  # below the dialect's 1 s floor, to keep the test short
            link.reconnect()
            with pytest.raises(InstrumentTimeout) as err:
                bb.identify()
    seen = {"serial": "received b'Invented Lab,TB-7\\r' so far, without the read terminator",
            "visa": "no line ending in the read terminator; VISA does not show partial replies"}
    assert f"(within 0.3 s ({seen[style]})" in str(err.value).replace("no reply within", "(within")
    assert str(err.value).endswith("reads up to '\\r\\n'")


def test_transport_events_are_logged_as_sentences(caplog: pytest.LogCaptureFixture) -> None:
    link = ScriptedTransport([("T.NOW?", "x"), ("T.NOW?", "22.0")], instrument="blackbody",
                             policy=RetryPolicy(retries=1, backoff_s=0.0))
    with caplog.at_level(logging.WARNING, logger="nightbench.transport"):
        assert link.query("T.NOW?", float) == 22.0
    assert "transport.retry blackbody: 'T.NOW?', attempt 1: blackbody: reply not understood" \
        in caplog.text
    assert "{'type'" not in caplog.text


def _dist(root: Path, name: str, entry_points: str) -> None:
    info = root / f"{name}-1.0.dist-info"
    info.mkdir(parents=True)
    (info / "METADATA").write_text(f"Metadata-Version: 2.1\nName: {name}\nVersion: 1.0\n")
    (info / "entry_points.txt").write_text(entry_points)


def test_a_misspelt_entry_point_group_is_reported(tmp_path: Path) -> None:
    _dist(tmp_path, "lab_stage", "[nightbench.driver]\nlab-stage = lab_stage:Stage\n")
    found = misspelt_groups(distributions(path=[str(tmp_path)]))
    assert [str(f) for f in found] == [
        "package lab_stage declares lab-stage under the entry-point group 'nightbench.driver', "
        "which nightbench does not read; rename the group to 'nightbench.drivers' in its "
        "pyproject.toml and reinstall it"]


def test_a_broken_entry_point_shows_its_exception(tmp_path: Path,
                                                  monkeypatch: pytest.MonkeyPatch) -> None:
    _dist(tmp_path, "lab_broken", "[nightbench.drivers]\nlab-broken = no_such_module:Stage\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    (info,) = [d for d in list_drivers() if d.name == "lab-broken"]
    assert info.kind == "broken"
    assert info.error == ("driver 'lab-broken' (no_such_module:Stage, package lab_broken) cannot "
                          "be loaded: ModuleNotFoundError: No module named 'no_such_module'")


# --- limits in one place ----------------------------------------------------------------------

def test_setpoint_problem_is_the_check_the_driver_applies() -> None:
    wide = {**KIND_SETTINGS, "limits": {**KIND_SETTINGS["limits"], "max_c": 200.0}}
    with ScriptedTransport([], instrument="blackbody") as link:
        bb = InventedBlackbody(link, name="blackbody", settings=wide)
        assert bb.setpoint_problem("absolute", 95.0) is None
        # station allows 200 C; the TB-7's manual range ends at 150 C (its declaration)
        assert bb.setpoint_problem("absolute", 160.0) == \
            "160.0 outside the instrument's range -20.0..150.0"
        assert bb.setpoint_problem("difference", -20.0) == \
            "difference -20.0 K outside the station limits -15.0..50.0 K"
        assert bb.setpoint_problem("absolute", float("nan")).startswith("nan C outside")
        with pytest.raises(LimitError, match="^blackbody: 160.0 outside the instrument's range "
                                             "-20.0..150.0; nothing was sent$"):
            bb.set_temperature(160.0)
    assert link.sent == []


def test_position_problem_is_the_check_the_stage_applies() -> None:
    with ScriptedTransport([], instrument="stage") as link:
        st = ScpiStage(link, name="stage", settings={"axes": {"az": {"min": -40, "max": 40}}})
        assert st.position_problem("az", 12.0) is None
        assert st.position_problem("az", 50.0) == "az 50.0 outside -40.0..40.0 deg"
        assert st.position_problem("el", 0.0) == "no axis 'el'; axes are az"
        with pytest.raises(LimitError, match="az 50.0 outside -40.0..40.0 deg; no axis was moved"):
            st.move_to({"az": 50.0})


# --- the clock follows the instruments ---------------------------------------------------------

def test_any_real_instrument_means_real_time() -> None:
    assert isinstance(choose_clock(False, None), RealClock)
    assert isinstance(choose_clock(False, 10.0), RealClock)    # --realtime cannot slow a real one
    assert isinstance(choose_clock(True, None), SimClock)
    paced = choose_clock(True, 5.0)
    assert isinstance(paced, PacedClock) and paced.speed == 5.0
    assert mixed_station_note(["wheel", "stage", "camera"], []) is None
    assert mixed_station_note(["wheel", "stage"], ["blackbody"]) == (
        "this station mixes real (blackbody) and simulated (wheel, stage) instruments: it runs "
        "on real time, so the simulated ones move at their real speed and waits take wall-clock "
        "time")


# --- the drivers command and the station loader name the cause ---------------------------------

def test_a_station_naming_a_broken_driver_shows_its_exception(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from sequences.yamlsource import SourceError
    from station.inputs.config import BUILTIN_DIR, load_station

    _dist(tmp_path / "site", "lab_broken", "[nightbench.drivers]\n"
                                           "lab-broken = no_such_module:Stage\n")
    monkeypatch.syspath_prepend(str(tmp_path / "site"))
    text = (BUILTIN_DIR / "sim_station.yaml").read_text(encoding="utf-8")
    text = text.replace("driver: scpi-stage", "driver: lab-broken")
    text = text.replace("camera_truth: demo_camera_truth.yaml",
                        f"camera_truth: {BUILTIN_DIR / 'demo_camera_truth.yaml'}")
    path = tmp_path / "station.yaml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(SourceError) as info:
        load_station(path)
    (problem,) = [str(p) for p in info.value.problems]
    assert ("stage: driver 'lab-broken' (no_such_module:Stage, package lab_broken) cannot be "
            "loaded: ModuleNotFoundError: No module named 'no_such_module'") in problem
    assert "not a stage driver" not in problem


def test_drivers_name_shows_one_drivers_settings(capsys: pytest.CaptureFixture[str]) -> None:
    from station.cli.main import main

    assert main(["drivers", "scpi-configurable-blackbody"]) == 0
    out = " ".join(capsys.readouterr().out.split())  # undo the console's line wrapping
    assert out.startswith("scpi-configurable-blackbody: blackbody driver from package nightbench")
    assert "booleans: {'true': [words], 'false': [words]} (default 1 / 0; quote YES, NO, ON, " \
           "OFF)" in out
    assert main(["drivers", "scpi-blackbod"]) == 2
    assert "did you mean 'scpi-blackbody'?" in capsys.readouterr().out


def test_drivers_check_reports_a_misspelt_group(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    from station.cli.main import main

    _dist(tmp_path, "lab_stage", "[nightbench_drivers]\nlab-stage = lab_stage:Stage\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    assert main(["drivers", "--check"]) == 2
    out = " ".join(capsys.readouterr().out.split())
    assert ("package lab_stage declares lab-stage under the entry-point group "
            "'nightbench_drivers', which nightbench does not read") in out


def test_check_refuses_a_station_whose_safing_command_has_a_typo(
        fake, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """Through `nightbench check`, against the TB-7 fake on a real socket: the set command
    `T.SETT` loads (a well-formed template) but the safing dry run fails before anything moves."""
    from station.cli.main import main
    from station.inputs.config import BUILTIN_DIR

    clock, bench, server, late = fake
    doc = yaml.safe_load((BUILTIN_DIR / "sim_station.yaml").read_text(encoding="utf-8"))
    entry = settings_of(station_text('set_temperature: "T.SET {value:.2f}"',
                                     'set_temperature: "T.SETT {value:.2f}"'))
    doc["instruments"]["blackbody"] = {"driver": "scpi-configurable-blackbody",
                                       "resource": f"socket://127.0.0.1:{server.port}", **entry}
    doc["simulation"]["camera_truth"] = str(BUILTIN_DIR / "demo_camera_truth.yaml")
    station = tmp_path / "station.yaml"
    station.write_text(yaml.safe_dump(doc, sort_keys=False), encoding="utf-8")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text("recipe: one\ndescription: one setpoint\nsteps:\n"
                      "  - blackbody: {mode: absolute, value: 30.0, hold: 1, timeout: 60}\n")
    assert main(["check", str(recipe), "--station", str(station)]) == 4
    out = " ".join(capsys.readouterr().out.split())
    assert ("blackbody safing: the safing commands fail: blackbody: refused (error 100); "
            "command 'T.SETT 22.00'; reply 'ERR 100'") in out
    assert "check passed" not in out


def test_a_declared_stage_state_maps_words_to_busy_and_faults() -> None:
    settings = {"axes": {"x": {"min": -50, "max": 50, "unit": "mm"}}, "commands": {
        "identify": {"query": "ID?", "reply": "(?P<value>.+)"},
        "move": "GO {axis} {value:.3f}",
        "position": {"query": "WHERE {axis}", "reply": "(?P<value>[-+0-9.]+)"},
        "state": {"query": "ST {axis}", "reply": "(?P<value>[A-Z]+)",
                  "words": {"IDLE": "ready", "RUN": "moving", "JAM": "jammed"}},
        "home": "ZERO {axis}", "stop": "HALT"},
        "replies": {"ok": "ACK", "error": "NAK (?P<code>\\d+)"}}
    script = [("GO x 12.500", "ACK"), ("ST x", "RUN"), ("ST x", "IDLE"), ("ST x", "JAM"),
              ("WHERE x", "7.25")]
    from drivers.configurable import ConfigurableStage
    from drivers.errors import InstrumentFault

    with ScriptedTransport(script, instrument="stage") as link:
        st = ConfigurableStage(link, name="stage", settings=settings)
        st.move_to({"x": 12.5})
        assert st.is_moving() is True and st.is_moving() is False
        with pytest.raises(InstrumentFault) as err:
            st.is_moving()
    assert str(err.value) == ("stage: axis x jammed at 7.250; command 'ST x'. ZERO x after "
                              "checking the stage")


def test_run_refuses_a_station_whose_safing_command_has_a_typo_before_anything_moves(
        fake, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """Through `nightbench run` (not only `check`): preflight's safing dry run refuses the run
    before any step starts. Safing on the way out goes through the same broken template, so the
    console says SAFING INCOMPLETE with the manual steps and the exit code is SAFING_FAILED (7):
    nightbench cannot set this source safe, and says so."""
    import json

    from station.cli import exitcodes
    from station.cli.main import main
    from station.inputs.config import BUILTIN_DIR

    clock, bench, server, late = fake
    doc = yaml.safe_load((BUILTIN_DIR / "sim_station.yaml").read_text(encoding="utf-8"))
    entry = settings_of(station_text('set_temperature: "T.SET {value:.2f}"',
                                     'set_temperature: "T.SETT {value:.2f}"'))
    doc["instruments"]["blackbody"] = {"driver": "scpi-configurable-blackbody",
                                       "resource": f"socket://127.0.0.1:{server.port}", **entry}
    doc["simulation"]["camera_truth"] = str(BUILTIN_DIR / "demo_camera_truth.yaml")
    station = tmp_path / "station.yaml"
    station.write_text(yaml.safe_dump(doc, sort_keys=False), encoding="utf-8")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text("recipe: one\ndescription: one setpoint\nsteps:\n"
                      "  - blackbody: {mode: absolute, value: 30.0, hold: 1, timeout: 60}\n")
    code = main(["run", str(recipe), "--station", str(station), "--runs", str(tmp_path / "runs"),
                 "--plain"])
    out = " ".join(capsys.readouterr().out.split())
    assert code == exitcodes.SAFING_FAILED
    assert ("run faulted: preflight: blackbody safing dry run: the safing commands fail: "
            "blackbody: refused (error 100); command 'T.SETT 22.00'; reply 'ERR 100'") in out
    assert "SAFING INCOMPLETE" in out and "set it to 22 C at the front panel" in out
    events = [json.loads(line) for line in
              next((tmp_path / "runs").glob("*/events.jsonl")).read_text().splitlines()]
    assert not [e for e in events if e["type"] == "step.start"]  # nothing moved
    assert bench.blackbody.setpoint_c() == pytest.approx(22.0)  # the source was left as it was
