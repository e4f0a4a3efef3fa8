"""The monitor end to end in a real headless browser (Debian's Chromium driven by Playwright).

A paced simulated run goes on in its own process; the monitor in another. The page must show the
step and progress advancing and the frame preview; pause and continue must reach the run (its
live status on disk says so); the monitor can be killed and restarted without the run noticing;
abort must end in safing, recorded in the event log with the monitor as its source.
Screenshots are saved for people to look at (path printed).
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
REQUIRED = os.environ.get("NIGHTBENCH_REQUIRE_SERVICES") == "1"


def _need_browser() -> None:
    problem = None
    try:
        import playwright.sync_api  # noqa: F401
    except ImportError:
        problem = "the playwright package is not installed"
    if problem is None and not Path(CHROMIUM).exists():
        problem = "Chromium is not installed (Debian package chromium)"
    if problem:
        if REQUIRED:
            pytest.fail(problem)
        pytest.skip(problem)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _wait(predicate, timeout_s: float, what: str):  # real time: two real processes are watched
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        value = predicate()
        if value:
            return value
        time.sleep(0.1)
    raise AssertionError(f"timed out after {timeout_s} s waiting for {what}")


def _status(run: Path) -> dict:
    try:
        return json.loads((run / "live" / "status.json").read_text())
    except (OSError, ValueError):
        return {}


def _start_monitor(folder: Path, port: int) -> subprocess.Popen:
    proc = subprocess.Popen([sys.executable, "-m", "station", "monitor", str(folder),
                             "--port", str(port)], stdout=subprocess.PIPE,
                            stderr=subprocess.STDOUT)

    def up() -> bool:
        with socket.socket() as s:
            return s.connect_ex(("127.0.0.1", port)) == 0

    _wait(up, 30, "the monitor to listen")
    return proc


@pytest.mark.timeout(240)
def test_watch_pause_continue_restart_and_abort_a_paced_run(tmp_path: Path) -> None:
    _need_browser()
    from playwright.sync_api import sync_playwright

    runs = tmp_path / "runs"
    shots = Path(__file__).resolve().parents[1] / "artifacts" / "monitor"  # kept for people
    shots.mkdir(parents=True, exist_ok=True)
    run_proc = subprocess.Popen(
        [sys.executable, "-m", "station", "run", "distortion-scan", "--runs", str(runs),
         "--realtime", "30", "--plain"], stdout=subprocess.PIPE, stderr=subprocess.STDOUT)
    port = _free_port()
    monitor = _start_monitor(runs.parent / "runs" if runs.exists() else tmp_path, port)
    try:
        run = _wait(lambda: next(iter(runs.glob("*/live/status.json")), None), 60,
                    "the run's live status").parent.parent
        monitor.terminate()
        monitor.wait(10)
        monitor = _start_monitor(runs, port)  # serve the folder of runs
        with sync_playwright() as pw:
            browser = pw.chromium.launch(executable_path=CHROMIUM, args=[
                "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                "--disable-background-networking", "--disable-component-update",
                "--disable-sync"])  # playwright gives each launch a fresh profile
            page = browser.new_page(viewport={"width": 1200, "height": 1400})
            errors: list[str] = []
            page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
            page.on("dialog", lambda d: d.accept())
            page.goto(f"http://127.0.0.1:{port}/")
            page.click(f"text={run.name}")
            page.wait_for_function("document.getElementById('step').textContent !== '-'")
            first_step = page.text_content("#step")
            page.wait_for_function(
                f"document.getElementById('step').textContent !== {json.dumps(first_step)}",
                timeout=60_000)
            page.wait_for_function("() => { const i = document.getElementById('preview');"
                                   " return !i.hidden && i.complete && i.naturalWidth > 0; }",
                                   timeout=60_000)
            page.screenshot(path=str(shots / "1-running.png"), full_page=True)

            page.click("#pause")
            _wait(lambda: _status(run).get("state") == "paused", 60, "the run to pause")
            page.wait_for_function("document.getElementById('state').textContent === 'paused'")
            page.screenshot(path=str(shots / "2-paused.png"), full_page=True)
            page.click("#continue")
            _wait(lambda: _status(run).get("state") == "running", 60, "the run to continue")

            assert not errors, errors  # up to here no request of the page failed
            # The monitor dies and comes back: the run goes on, the page catches up on reload.
            monitor.kill()
            monitor.wait(10)
            step_before = _status(run).get("step_index")
            _wait(lambda: _status(run).get("step_index") != step_before, 60,
                  "the run to advance while no monitor runs")
            monitor = _start_monitor(runs, port)
            page.reload()
            errors.clear()  # the stream cut by the kill is reported by the browser, as it should
            page.wait_for_function("document.getElementById('state').textContent === 'running'")

            page.click("#abort")
            assert run_proc.wait(120) == 3  # aborted (README exit codes)
            page.wait_for_function("document.getElementById('state').textContent === 'aborted'",
                                   timeout=30_000)
            page.screenshot(path=str(shots / "3-aborted.png"), full_page=True)
            browser.close()
        events = [json.loads(line) for line in (run / "events.jsonl").read_text().splitlines()]
        requests = [e for e in events if e["type"] == "operator.request"]
        assert [r["action"] for r in requests] == ["pause", "continue", "abort"]
        assert all(r["source"].startswith("monitor") for r in requests)
        states = [e.get("dest") for e in events if e["type"] == "state"]
        assert "paused" in states and states[-2:] == ["safing", "aborted"]
        manifest = json.loads((run / "manifest.json").read_text())
        assert manifest["state"] == "aborted"
        assert not errors, errors
        print(f"\nmonitor screenshots: {shots}")
    finally:
        for proc in (run_proc, monitor):
            if proc.poll() is None:
                proc.send_signal(signal.SIGTERM)
                try:
                    proc.wait(20)
                except subprocess.TimeoutExpired:
                    proc.kill()
