"""Run folder: naming, layout, opening, inputs as run, captures and registered results."""

from __future__ import annotations

import datetime as dt
import hashlib
import json
from pathlib import Path

import numpy as np
import pytest

from drivers.clock import SimClock
from drivers.interfaces import Frame
from station.record.events import read_events
from station.record.runfolder import RunFolder, RunFolderError, folder_name, is_run_folder

START = dt.datetime(2026, 1, 1, 18, 5, 9, tzinfo=dt.timezone.utc)


def test_folder_name_is_iso8601_basic_utc_serial_and_recipe() -> None:
    # ISO 8601 basic format with Z: 2026-01-01 18:05:09 UTC -> 20260101T180509Z.
    assert folder_name(START, "SN-0042", "sitf_sweep") == "20260101T180509Z_SN-0042_sitf-sweep"
    plus_one = START.astimezone(dt.timezone(dt.timedelta(hours=1)))  # same instant, UTC+1
    assert folder_name(plus_one, "a/b c", "../x") == "20260101T180509Z_a-b-c_x"
    assert folder_name(START, "", "") == "20260101T180509Z_unknown-uut_recipe"


def test_create_makes_the_layout_and_never_reuses_a_folder(tmp_path: Path) -> None:
    one = RunFolder.create(tmp_path / "runs", uut_serial="SN-0042", recipe_name="sitf_sweep",
                           utc=START)
    two = RunFolder.create(tmp_path / "runs", uut_serial="SN-0042", recipe_name="sitf_sweep",
                           utc=START)
    assert one.path.name == "20260101T180509Z_SN-0042_sitf-sweep"
    assert two.path.name == "20260101T180509Z_SN-0042_sitf-sweep-2"
    assert sorted(p.name for p in one.path.iterdir()) == [
        "frames", "inputs", "plots", "results", "run-folder.json", "space.reserve", "writer.lock"]
    assert is_run_folder(one.path) and one.results_dir.is_dir() and one.plots_dir.is_dir()


def test_open_refuses_what_is_not_a_run_folder(tmp_path: Path) -> None:
    with pytest.raises(RunFolderError, match="no such folder"):
        RunFolder.open(tmp_path / "missing")
    (tmp_path / "plain").mkdir()
    with pytest.raises(RunFolderError, match=r"plain: not a run folder"):
        RunFolder.open(tmp_path / "plain")
    (tmp_path / "file.txt").write_text("x")
    with pytest.raises(RunFolderError, match="is a file"):
        RunFolder.open(tmp_path / "file.txt")
    broken = tmp_path / "broken"
    broken.mkdir()
    (broken / "run-folder.json").write_text("{oops")
    with pytest.raises(RunFolderError, match="damaged"):
        RunFolder.open(broken)


def test_inputs_are_copied_as_run_with_their_sha256(tmp_path: Path) -> None:
    station = tmp_path / "bench A.yaml"
    station.write_text("blackbody: {driver: sim}\n")
    recipe = tmp_path / "sweep.yaml"
    recipe.write_bytes(b"steps: []\n")
    folder = RunFolder.create(tmp_path / "runs", uut_serial="SN1", recipe_name="sweep", utc=START)
    inputs = folder.copy_inputs(station=station, recipe=recipe,
                                texts={"uut": ("demo_uut.yaml", "format: [640, 512]\n")})
    for role, source in (("station", station.read_bytes()), ("recipe", recipe.read_bytes()),
                         ("uut", b"format: [640, 512]\n")):
        # Reference: hashlib SHA-256 of the original bytes.
        assert inputs[role]["sha256"] == hashlib.sha256(source).hexdigest()
        assert folder.input_path(role).read_bytes() == source
    assert inputs["station"]["relpath"] == "inputs/station__bench-A.yaml"
    station.write_text("changed after the run\n")
    reopened = RunFolder.open(folder.path)
    assert reopened.inputs["station"]["sha256"] == inputs["station"]["sha256"]
    with pytest.raises(RunFolderError, match="cannot copy the recipe file"):
        folder.copy_inputs(recipe=tmp_path / "nope.yaml")


def test_capture_and_registered_result_are_logged(tmp_path: Path) -> None:
    clock = SimClock()
    folder = RunFolder.create(tmp_path, uut_serial="SN1", recipe_name="r", utc=START, clock=clock)
    with folder.new_capture("sweep[1].capture", "flat", keep="average", expected_count=3) as cap:
        for i in range(3):
            cap.add(Frame(np.full((8, 8), 100 + i, np.uint16), i, clock.now()))
        record = cap.finish()
    assert record.to_dict(folder.path)["average"] == "frames/flat.avg.tif"
    result = folder.results_dir / "netd.json"
    result.write_text('{"netd_mK": 41.0}\n')
    entry = folder.register(result)
    assert entry["path"] == "results/netd.json"
    assert entry["sha256"] == hashlib.sha256(b'{"netd_mK": 41.0}\n').hexdigest()
    with pytest.raises(RunFolderError, match="outside the run folder"):
        folder.register(tmp_path / "elsewhere.txt")
    folder.close()
    kinds = [e["type"] for e in read_events(folder.events_path)]
    assert kinds == ["capture.stored", "file_written"]
    # The mean of 100, 101, 102 is exactly 101 (float32 holds it exactly).
    from station.record.frame_store import load_average
    assert float(load_average(folder, "flat").mean()) == 101.0


def test_resume_sets_unfinished_captures_aside(tmp_path: Path) -> None:
    clock = SimClock()
    folder = RunFolder.create(tmp_path, uut_serial="SN1", recipe_name="r", utc=START, clock=clock)
    cap = folder.new_capture("scan[2].capture", "spot", keep="stack")
    for i in range(4):
        cap.add(Frame(np.zeros((8, 8), np.uint16), i, 0.0))
    cap._close_streams()  # interrupted
    folder.close()
    again = RunFolder.open(folder.path, clock=clock)
    (aside,) = again.set_aside_partials()
    assert aside.relative_to(again.path).as_posix() == "frames/abandoned/scan2.capture-1"
    (event,) = read_events(again.events_path, "capture.abandoned")
    assert event["frames_added"] == 4 and event["step"] == "scan[2].capture"
    again.close()


@pytest.mark.parametrize("clock_kind", ["simulated", "real"])
def test_frames_are_fsynced_only_on_real_time(tmp_path: Path, clock_kind: str,
                                             monkeypatch: pytest.MonkeyPatch) -> None:
    """A run on simulated time is made again from its seed in seconds: its frames are not
    flushed to the disk one by one. A real run's are (POSIX fsync before the rename: a power
    cut leaves either the old name or the whole file; common practice for durable writes).
    Either way the files are renamed complete and checksummed, so `verify` catches damage."""
    from drivers.clock import RealClock
    from station.record import frame_store

    synced: list[str] = []
    monkeypatch.setattr(frame_store, "fsync_file", lambda path: synced.append(Path(path).name))
    clock = SimClock() if clock_kind == "simulated" else RealClock()
    folder = RunFolder.create(tmp_path, uut_serial="SN1", recipe_name="r", utc=START, clock=clock)
    with folder.new_capture("capture", "flat", keep="both", expected_count=2) as cap:
        for i in range(2):
            cap.add(Frame(np.full((8, 8), 100 + i, np.uint16), i, clock.now()))
        record = cap.finish()
    folder.close()
    expected = [] if clock_kind == "simulated" else ["flat.stack.tif.partial", "flat.avg.tif.partial"]
    assert synced == expected
    meta = json.loads((folder.path / "frames" / "flat.json").read_text())
    assert hashlib.sha256(record.stack_path.read_bytes()).hexdigest() == \
        meta["files"]["stack"]["sha256"]
