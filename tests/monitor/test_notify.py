"""Notifications: a JSON summary POSTed to a loopback server when a run ends and when it faults;
a notification that cannot be delivered is logged and never affects the run."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from station.cli.main import main
from station.inputs.config import DEFAULT_SIM_STATION
from tests.loopback_http import json_receiver

RECIPE_OK = """\
recipe: notify-ok
steps:
  - note: nothing to do but finish
"""
# A blackbody step that can never settle in its timeout: the run faults (in simulated time).
RECIPE_FAULT = """\
recipe: notify-fault
steps:
  - blackbody: {mode: difference, value: 30, tolerance: 0.001, hold: 5, timeout: 20}
"""


@pytest.fixture()
def receiver():
    with json_receiver() as (url, received):
        yield url, received


def _station_with(tmp_path: Path, notify: str) -> Path:
    text = DEFAULT_SIM_STATION.read_text().replace("camera_truth: demo_camera_truth.yaml",
                                                   f"camera_truth: {DEFAULT_SIM_STATION.parent}"
                                                   "/demo_camera_truth.yaml")
    path = tmp_path / "station.yaml"
    path.write_text(text + "\n" + notify)
    return path


def _events(runs: Path) -> list[dict]:
    log = next(runs.glob("*/events.jsonl"))
    return [json.loads(line) for line in log.read_text().splitlines()]


def test_post_on_run_end_and_on_fault(tmp_path: Path, receiver) -> None:
    url, received = receiver
    station = _station_with(tmp_path, f"notify: {{url: '{url}', when: [end, fault]}}\n")
    for name, text in (("ok", RECIPE_OK), ("fault", RECIPE_FAULT)):
        recipe = tmp_path / f"{name}.yaml"
        recipe.write_text(text)
        main(["run", str(recipe), "--station", str(station), "--runs",
              str(tmp_path / f"runs-{name}"), "--plain"])
    assert [r["occasion"] for r in received] == ["end", "fault"]
    assert received[0]["state"] == "complete" and received[0]["recipe"] == "notify-ok"
    assert received[1]["state"] == "faulted" and "settle" in received[1]["cause"]
    assert all(r["uut_serial"] == "DEMO-0042" for r in received)
    sent = [e for e in _events(tmp_path / "runs-ok") if e["type"] == "notify.sent"]
    assert sent and sent[0]["occasion"] == "end"


def test_undeliverable_notification_is_logged_and_the_run_completes(tmp_path: Path) -> None:
    # Port 9 on loopback ("discard") has no listener here: the POST is refused at once.
    station = _station_with(tmp_path, "notify: {url: 'http://127.0.0.1:9/x', timeout_s: 2}\n")
    recipe = tmp_path / "ok.yaml"
    recipe.write_text(RECIPE_OK)
    code = main(["run", str(recipe), "--station", str(station), "--runs", str(tmp_path / "r"),
                 "--plain"])
    assert code == 0
    failed = [e for e in _events(tmp_path / "r") if e["type"] == "notify.failed"]
    assert len(failed) == 1 and failed[0]["via"] == "url"
    manifest = json.loads(next((tmp_path / "r").glob("*/manifest.json")).read_text())
    assert manifest["state"] == "complete"


@pytest.mark.parametrize("section, message", [
    ("notify: {url: 'ftp://nowhere'}", "'url' must start with http:// or https://"),
    ("notify: {url: 'http://127.0.0.1:9/', when: [sometimes]}", "'when' must be a list of"),
    # YAML 1.1 reads a bare `on:` key as the boolean true: named, with the fix.
    ("notify: {url: 'http://127.0.0.1:9/', on: [end]}", "was read by YAML as true"),
])
def test_bad_notify_section_is_refused_with_its_line(tmp_path: Path, capsys, section: str,
                                                     message: str) -> None:
    station = _station_with(tmp_path, section + "\n")
    recipe = tmp_path / "ok.yaml"
    recipe.write_text(RECIPE_OK)
    assert main(["check", str(recipe), "--station", str(station), "--no-connect"]) == 2
    out = " ".join(capsys.readouterr().out.split())
    line = station.read_text().splitlines().index(section) + 1  # the appended section's line
    assert f"station.yaml:{line}:" in out and message in out
