"""FolderSite.remembered: a result shared by the analyses of one run is computed once for the
same captures, and afresh when a capture's files change (a retake under the same name)."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import numpy as np

from drivers.clock import SimClock
from drivers.interfaces import Frame
from station.analyses.site import FolderSite
from station.record.runfolder import RunFolder

START = dt.datetime(2026, 1, 1, 18, 5, 9, tzinfo=dt.timezone.utc)


def capture(folder: RunFolder, name: str, level: int) -> None:
    with folder.new_capture("capture", name, keep="both", expected_count=2) as cap:
        for i in range(2):
            cap.add(Frame(np.full((8, 8), level + i, np.uint16), i, folder.clock.now()))
        cap.finish()


def test_computed_once_per_unchanged_captures(tmp_path: Path) -> None:
    folder = RunFolder.create(tmp_path, uut_serial="SN1", recipe_name="r", utc=START,
                              clock=SimClock())
    capture(folder, "cool", 100)
    capture(folder, "warm", 200)
    memo: dict = {}
    calls: list[int] = []

    def site() -> FolderSite:  # one site per analysis step, one memo per run
        return FolderSite(folder.path, folder.results_dir, folder.plots_dir, run_id="r",
                          memo=memo)

    def compute() -> int:
        calls.append(1)
        return len(calls)

    assert site().remembered("bad pixels", ("cool", "warm"), compute) == 1
    assert site().remembered("bad pixels", ("cool", "warm"), compute) == 1
    assert site().remembered("bad pixels", ("warm", "cool"), compute) == 2   # other order: other map
    capture(folder, "warm", 300)                 # retaken: new files, new checksums
    assert site().remembered("bad pixels", ("cool", "warm"), compute) == 3
    assert len(calls) == 3
    folder.close()
