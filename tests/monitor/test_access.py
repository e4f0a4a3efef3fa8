"""Access rules of the monitor: tokens for controls, tokens for everything beyond loopback,
read-only mode, and nothing served from outside the folder of runs."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from starlette.testclient import TestClient

from station.monitor.app import MonitorSettings, build_app
from station.record.live import ACTIONS, LIVE_DIR, REQUESTS_DIR, STATUS_NAME


def _fake_run(root: Path, name: str = "20261202T010203Z_DEMO-0042_distortion-grid",
              state: str = "running") -> Path:
    run = root / name
    (run / LIVE_DIR).mkdir(parents=True)
    (run / "run-folder.json").write_text("{}")
    (run / "events.jsonl").write_text(json.dumps({"type": "state", "seq": 1, "dest": state}) + "\n")
    (run / LIVE_DIR / STATUS_NAME).write_text(json.dumps({"state": state, "pid": 1}))
    return run


def _requests(run: Path) -> list[Path]:
    folder = run / LIVE_DIR / REQUESTS_DIR
    return sorted(folder.glob("*.json")) if folder.exists() else []


@pytest.mark.parametrize("action", ACTIONS)
def test_every_control_refused_without_the_token(tmp_path: Path, action: str) -> None:
    run = _fake_run(tmp_path)
    client = TestClient(build_app(MonitorSettings(tmp_path, token="s3cret-token")))
    url = f"/api/runs/{run.name}/control/{action}"
    assert client.post(url).status_code == 403
    assert client.post(url, headers={"X-Nightbench-Token": "wrong"}).status_code == 403
    assert _requests(run) == []  # nothing reached the run
    ok = client.post(url, headers={"X-Nightbench-Token": "s3cret-token"})
    assert ok.status_code == 200
    body = json.loads(_requests(run)[0].read_text())
    assert body["action"] == action and body["source"].startswith("monitor")


def test_beyond_loopback_the_page_needs_the_token_too(tmp_path: Path) -> None:
    run = _fake_run(tmp_path)
    client = TestClient(build_app(MonitorSettings(tmp_path, token="tok", loopback=False)))
    assert client.get("/").status_code == 401
    assert client.get(f"/api/runs/{run.name}").status_code == 401
    assert client.post("/login", data={"token": "nope"}).status_code == 401
    logged = client.post("/login", data={"token": "tok"}, follow_redirects=False)
    assert logged.status_code == 303 and "nightbench_token" in logged.cookies
    assert client.get(f"/api/runs/{run.name}").json()["state"] == "running"


def test_read_only_monitor_has_no_controls(tmp_path: Path) -> None:
    run = _fake_run(tmp_path)
    client = TestClient(build_app(MonitorSettings(tmp_path, read_only=True)))
    assert client.post(f"/api/runs/{run.name}/control/abort").status_code == 403
    assert 'id="abort"' not in client.get(f"/runs/{run.name}").text
    assert _requests(run) == []


def test_no_run_outside_the_folder_and_no_control_of_an_ended_run(tmp_path: Path) -> None:
    inner = tmp_path / "runs"
    inner.mkdir()
    _fake_run(tmp_path, name="elsewhere")
    ended = _fake_run(inner, state="complete")
    client = TestClient(build_app(MonitorSettings(inner)))
    assert client.get("/api/runs/..%2Felsewhere").status_code == 404
    assert client.get("/runs/../elsewhere").status_code in (404, 200) and \
        "elsewhere" not in client.get("/").text
    assert client.post(f"/api/runs/{ended.name}/control/pause").status_code == 409
