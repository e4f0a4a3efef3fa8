"""The in-process link (`sim+local`) answers a whole run exactly as a socket does.

Reference: the same recipe on the same simulated bench with the blackbody and the stage behind
pyvisa over loopback sockets (`sim+visa`); the two runs must send the same commands, get the
same replies and find the same results. Only the transport differs, so any difference is the
link's.
"""

from __future__ import annotations

import json
from pathlib import Path

from station.cli.main import main
from station.record.events import read_events
from tests.station.fast_bench import fast_station_yaml

RECIPE = """\
recipe: local-link
steps:
  - target: open
  - move: {az: 1.0, el: 0.5}
  - blackbody: {mode: difference, value: 2, tolerance: 0.05, hold: 5, timeout: 120}
  - capture: {name: cool, frames: 4, keep: both}
  - blackbody: {mode: difference, value: 6, tolerance: 0.05, hold: 5, timeout: 120}
  - capture: {name: warm, frames: 4, keep: both}
  - analyze: {analysis: sitf, captures: [cool, warm]}
"""


def run(tmp_path: Path, link: str) -> tuple[list[tuple[str, str, str]], dict]:
    folder = tmp_path / link.replace("+", "-")
    folder.mkdir()
    station = folder / "station.yaml"
    text = fast_station_yaml("link-bench", timeout_s=1.0)
    for driver in ("scpi-blackbody", "scpi-stage"):
        text = text.replace(f"driver: {driver}\n    resource: sim+visa",
                            f"driver: {driver}\n    resource: {link}")
    assert text.count(f"resource: {link}") == 2
    station.write_text(text, encoding="utf-8")
    recipe = folder / "recipe.yaml"
    recipe.write_text(RECIPE, encoding="utf-8")
    code = main(["run", str(recipe), "--station", str(station), "--runs",
                 str(folder / "runs"), "--plain"])
    assert code in (0, 6)  # finished (the demo UUT may pass or fail its limits)
    path = next((folder / "runs").iterdir())
    io = [(e["instrument"], e["command"], e["reply"])
          for e in read_events(path / "events.jsonl") if e["type"] == "io"]
    return io, json.loads((path / "results" / "sitf.json").read_text())


def test_in_process_blackbody_and_stage_give_the_same_run_as_the_socket(tmp_path: Path) -> None:
    io_socket, sitf_socket = run(tmp_path, "sim+visa")
    io_local, sitf_local = run(tmp_path, "sim+local")
    assert sum(1 for i, _, _ in io_local if i == "blackbody") > 20
    assert sum(1 for i, _, _ in io_local if i == "stage") > 2
    assert io_local == io_socket
    assert sitf_local == sitf_socket
