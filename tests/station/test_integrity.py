"""Integrity under abuse: each case found by trying nightbench as a careless or hostile user would.

Every test reproduces one finding first (the exit code and the message are asserted), through the
command line in process (station.cli.main.main) on a fast simulated station in simulated time.
Exit codes are those documented in station/cli/exitcodes.py: 0 ok, 1 faulted, 2 bad input.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import tifffile

from station.cli import exitcodes
from station.cli.main import main
from station.record.verify import verify_run
from tests.station.fast_bench import fast_station_yaml

REPO = Path(__file__).resolve().parents[2]
STATION = fast_station_yaml("Fast simulated bench for integrity tests", timeout_s=0.5,
                            recovery=False)
RECIPE = """\
recipe: integrity-check
description: two short captures of the open aperture
steps:
  - target: open
  - capture: {name: first, frames: 3, keep: both}
  - capture: {name: second, frames: 3, keep: both}
"""


@pytest.fixture(scope="module")
def files(tmp_path_factory: pytest.TempPathFactory) -> Path:
    base = tmp_path_factory.mktemp("integrity-inputs")
    (base / "station.yaml").write_text(STATION, encoding="utf-8")
    (base / "recipe.yaml").write_text(RECIPE, encoding="utf-8")
    return base


def _run(files: Path, runs: Path, *extra: str, recipe: str = "recipe.yaml") -> int:
    return main(["run", str(files / recipe), "--station", str(files / "station.yaml"),
                 "--runs", str(runs), "--plain", *extra])


def _folder(runs: Path) -> Path:
    (folder,) = [p for p in runs.iterdir() if (p / "run-folder.json").exists()]
    return folder


@pytest.fixture(scope="module")
def complete_run(files: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    runs = tmp_path_factory.mktemp("complete")
    assert _run(files, runs) == exitcodes.OK
    return _folder(runs)


def _interrupted_copy(complete_run: Path, where: Path, keep_steps: int) -> Path:
    """A copy of a complete run made to look killed after `keep_steps` journalled steps: the
    later journal lines removed (the journal's documented way to run steps again) and the
    manifest back at `running`."""
    target = where / complete_run.name
    shutil.copytree(complete_run, target)
    journal = target / "journal.jsonl"
    lines = journal.read_text(encoding="utf-8").splitlines(keepends=True)
    journal.write_text("".join(lines[:keep_steps]), encoding="utf-8")
    manifest = json.loads((target / "manifest.json").read_text(encoding="utf-8"))
    manifest.update(state="running", cause=None, end_utc=None, end_clock=None, files={})
    (target / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")
    return target


def _manifest(run: Path) -> dict:
    return json.loads((run / "manifest.json").read_text(encoding="utf-8"))


# -- 1. one run folder, one writer ----------------------------------------------------------------
GATED = """\
import sys, time
from station.cli.main import main       # loaded before the gate opens
open(sys.argv[1], "rb").close()         # a FIFO: the kernel wakes every reader together
print(repr(time.time()), file=sys.stderr, flush=True)
sys.exit(main(sys.argv[2:]))
"""


def _race_two_resumes(run: Path, gate: Path) -> tuple[float, list[int], list[str]]:
    """Start two resumes of `run` together; returns (start gap s, exit codes, outputs)."""
    os.mkfifo(gate)
    cmd = [sys.executable, "-c", GATED, str(gate), "resume", str(run), "--plain"]
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    procs = [subprocess.Popen(cmd, cwd=REPO, env=env, stdout=subprocess.PIPE,
                              stderr=subprocess.PIPE, text=True) for _ in range(2)]
    time.sleep(1.5)  # real time on purpose: both interpreters loaded and blocked on the gate
    fd = os.open(gate, os.O_WRONLY)
    os.close(fd)
    results = [p.communicate(timeout=120) for p in procs]
    starts = [float(err.splitlines()[0]) for _, err in results]
    return abs(starts[0] - starts[1]), [p.returncode for p in procs], [o for o, _ in results]


def test_two_resumes_started_together_exactly_one_runs(complete_run: Path, tmp_path: Path) -> None:
    gaps = []
    for attempt in range(3):  # a loaded machine may wake the two apart: then race again
        run = _interrupted_copy(complete_run, tmp_path / f"try{attempt}", keep_steps=1)
        gap, codes, outs = _race_two_resumes(run, tmp_path / f"gate{attempt}")
        gaps.append(gap)
        assert sorted(codes) == [exitcodes.OK, exitcodes.INVALID], outs
        refused = outs[codes.index(exitcodes.INVALID)]
        assert "is writing this run folder" in refused and "pid" in refused and "since" in refused
        events = [json.loads(x) for x in (run / "events.jsonl").read_text().splitlines()]
        assert sum(e["type"] == "resume.start" for e in events) == 1
        steps = [json.loads(x)["step"] for x in (run / "journal.jsonl").read_text().splitlines()]
        assert len(steps) == len(set(steps)) == 3
        report = verify_run(run)
        assert report.ok, report.format()
        if gap < 0.010:
            break
    assert min(gaps) < 0.010, f"the two resumes never started within 10 ms: {gaps}"


# -- 2. resume trusts nothing it did not check -----------------------------------------------------
def test_resume_refuses_a_frame_changed_after_the_kill(complete_run: Path, tmp_path: Path,
                                                       capsys) -> None:
    run = _interrupted_copy(complete_run, tmp_path, keep_steps=2)
    stack = run / "frames" / "first.stack.tif"
    data = tifffile.imread(stack)
    data[0, 10, 10] += 1
    tifffile.imwrite(stack, data, photometric="minisblack")
    assert main(["resume", str(run), "--plain"]) == exitcodes.INVALID
    out = capsys.readouterr().out
    assert "frames/first.stack.tif: changed since step" in out and "--force" in out
    assert _manifest(run)["state"] == "running"  # nothing was touched
    assert main(["resume", str(run), "--plain", "--force"]) == exitcodes.OK
    session = _manifest(run)["sessions"][-1]
    assert any("frames/first.stack.tif" in f for f in session["accepted_changed_files"])


def test_resume_refuses_an_edited_recipe_copy(complete_run: Path, tmp_path: Path, capsys) -> None:
    run = _interrupted_copy(complete_run, tmp_path, keep_steps=2)
    (copy,) = (run / "inputs").glob("recipe__*")
    copy.write_text(copy.read_text() + "  - capture: {name: third, frames: 3}\n")
    assert main(["resume", str(run), "--plain"]) == exitcodes.INVALID
    out = capsys.readouterr().out
    assert f"inputs/{copy.name}: changed since the run copied the recipe file" in out


def test_leftover_temporary_file_is_set_aside_and_the_run_verifies(complete_run: Path,
                                                                  tmp_path: Path) -> None:
    run = _interrupted_copy(complete_run, tmp_path, keep_steps=2)
    (run / "results" / ".summary.json.x1y2.tmp").write_bytes(b'{"half": ')
    assert main(["resume", str(run), "--plain"]) == exitcodes.OK
    report = verify_run(run)
    assert report.ok, report.format()
    assert any(item["step_id"] == "temporary-files" for item in report.abandoned)


def test_verify_checks_capture_metadata_against_frames(complete_run: Path, tmp_path: Path) -> None:
    run = tmp_path / complete_run.name
    shutil.copytree(complete_run, run)
    stack = run / "frames" / "second.stack.tif"
    data = tifffile.imread(stack)
    data[1, 0, 0] += 1
    tifffile.imwrite(stack, data, photometric="minisblack")
    manifest = _manifest(run)  # someone "fixed" the manifest too: only the metadata can tell
    from station.record.atomic import sha256_file
    manifest["files"]["frames/second.stack.tif"] = {"sha256": sha256_file(stack),
                                                    "bytes": stack.stat().st_size}
    (run / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")
    report = verify_run(run)
    assert not report.ok
    assert any("capture 'second': stack file second.stack.tif does not match the checksum" in p
               for p in report.problems), report.format()


# -- 3. results never overwritten ------------------------------------------------------------------
def test_analyze_out_inside_a_run_folder_is_refused(complete_run: Path, capsys) -> None:
    frame = complete_run / "frames" / "first.avg.tif"
    geometry = REPO / "station" / "data" / "example_geometry.yaml"
    before = sorted(p.name for p in (complete_run / "results").iterdir())
    code = main(["analyze", "distortion", "--frame", str(frame), "--geometry", str(geometry),
                 "--out", str(complete_run / "results")])
    assert code == exitcodes.INVALID
    assert "is inside the run folder" in capsys.readouterr().out
    assert sorted(p.name for p in (complete_run / "results").iterdir()) == before
    assert verify_run(complete_run).ok


def test_reanalysis_out_inside_a_run_folder_is_refused(complete_run: Path, capsys) -> None:
    code = main(["analyze", "distortion", str(complete_run), "--out",
                 str(complete_run / "results" / "again")])
    assert code == exitcodes.INVALID
    assert "is inside the run folder" in capsys.readouterr().out
    assert not (complete_run / "results" / "again").exists()


def test_analysis_option_naming_a_results_folder_outside_the_run_is_refused(
        files: Path, tmp_path: Path) -> None:
    (files / "escape.yaml").write_text(RECIPE + "  - analyze: {analysis: distortion, captures: "
                                       f"[second], options: {{results_dir: {tmp_path / 'x'}}}}}\n")
    assert _run(files, tmp_path / "runs", recipe="escape.yaml") == exitcodes.INVALID
    assert not (tmp_path / "x").exists()


# -- 4. every failure path ends in a final state ----------------------------------------------------
def test_no_run_folder_for_a_bad_seed(files: Path, tmp_path: Path, capsys) -> None:
    with pytest.raises(SystemExit) as stop:
        _run(files, tmp_path / "runs", "--seed", "-5")
    assert stop.value.code == exitcodes.INVALID
    assert "give a whole number from 0" in capsys.readouterr().err
    assert not (tmp_path / "runs").exists()


def test_no_run_folder_for_a_bad_camera_truth_file(files: Path, tmp_path: Path, capsys) -> None:
    (tmp_path / "truth.yaml").write_text("geometry: [1, 2]\n")
    station = tmp_path / "station.yaml"
    station.write_text(STATION.replace(str(REPO / "station/data/demo_camera_truth.yaml"),
                                       str(tmp_path / "truth.yaml")))
    code = main(["run", str(files / "recipe.yaml"), "--station", str(station), "--runs",
                 str(tmp_path / "runs"), "--plain"])
    assert code == exitcodes.INVALID
    assert "geometry: missing or not a mapping" in capsys.readouterr().out
    assert not (tmp_path / "runs").exists() or not any((tmp_path / "runs").iterdir())


def test_disk_full_writing_the_event_log_ends_faulted_not_running(files: Path, tmp_path: Path,
                                                                  monkeypatch, capsys) -> None:
    import errno

    from station.record.events import EventLog

    real = EventLog._write_line

    def write(self, data: bytes, sync: bool) -> None:  # the disk fills once a capture is done
        if (self.path.parent / "frames" / "first.json").exists():
            raise OSError(errno.ENOSPC, "No space left on device")
        real(self, data, sync)

    monkeypatch.setattr(EventLog, "_write_line", write)
    code = _run(files, tmp_path / "runs")
    out = capsys.readouterr().out
    assert code == exitcodes.FAULTED
    assert "Traceback" not in out and "disk" in out.lower()
    manifest = _manifest(_folder(tmp_path / "runs"))
    assert manifest["state"] == "faulted"
    assert "could not be written to events.jsonl" in manifest["cause"]


# -- 5. bounded inputs -----------------------------------------------------------------------------
LAUGHS = "\n".join(
    ["recipe: laughs", "description: aliases", "a: &a [x, x, x, x, x, x, x, x, x, x]"]
    + [f"{c}: &{c} [{', '.join([f'*{p}'] * 10)}]" for p, c in zip("abcdefgh", "bcdefghi")]
    + ["steps:", "  - analyze: {analysis: distortion, captures: [x], options: {mode: *i}}", ""])


def _check(path: Path, *extra: str) -> int:
    return main(["check", str(path), "--no-connect", *extra])


def test_billion_laughs_recipe_refused_quickly_with_its_line(tmp_path: Path, capsys) -> None:
    recipe = tmp_path / "laughs.yaml"
    recipe.write_text(LAUGHS)
    t0 = time.monotonic()
    assert _check(recipe) == exitcodes.INVALID
    assert time.monotonic() - t0 < 5.0
    out = capsys.readouterr().out
    assert "laughs.yaml:7:" in out and "aliases" in out  # line 7: e holds 10^5 + 10^4 + ...


def test_five_thousand_nested_brackets_clear_error(tmp_path: Path, capsys) -> None:
    recipe = tmp_path / "deep.yaml"
    recipe.write_text("steps: " + "[" * 5000 + "]" * 5000 + "\n")
    assert _check(recipe) == exitcodes.INVALID
    out = capsys.readouterr().out
    assert "deep.yaml:1:" in out and "nested more than 64 deep" in out


@pytest.mark.parametrize("where", ["station", "geometry"])
def test_huge_pinhole_grid_refused(where: str, files: Path, tmp_path: Path, capsys) -> None:
    if where == "station":
        station = tmp_path / "station.yaml"
        station.write_text(STATION.replace("rows: 11, cols: 15", "rows: 100000, cols: 100000"))
        code = main(["check", str(files / "recipe.yaml"), "--station", str(station),
                     "--no-connect"])
    else:
        geometry = tmp_path / "geometry.yaml"
        text = (REPO / "station" / "data" / "example_geometry.yaml").read_text()
        geometry.write_text(text.replace("rows: 11", "rows: 100000").replace("cols: 15",
                                                                             "cols: 100000"))
        frame = tmp_path / "frame.tif"
        tifffile.imwrite(frame, np.zeros((512, 640), np.uint16))
        code = main(["analyze", "distortion", "--frame", str(frame), "--geometry",
                     str(geometry), "--out", str(tmp_path / "out")])
    assert code == exitcodes.INVALID
    assert "100000 x 100000 pinholes; at most 10000" in capsys.readouterr().out


def test_absurd_frame_count_refused(files: Path, capsys) -> None:
    recipe = files / "many.yaml"
    recipe.write_text(RECIPE.replace("frames: 3, keep: both}\n  - capture: {name: second",
                                     "frames: 100000000000000000000, keep: both}\n"
                                     "  - capture: {name: second"))
    code = main(["check", str(recipe), "--station", str(files / "station.yaml"), "--no-connect"])
    assert code == exitcodes.INVALID
    assert "must be at most 1e+06" in capsys.readouterr().out


def test_oversized_scan_plan_refused(files: Path, capsys) -> None:
    recipe = files / "bigscan.yaml"
    recipe.write_text("recipe: big\ndescription: x\nsteps:\n  - target: open\n"
                      "  - scan:\n      axes: {az: {from: -40, to: 40, step: 0.0001}}\n"
                      "      steps:\n        - capture: {name: p, frames: 1}\n")
    t0 = time.monotonic()
    code = main(["check", str(recipe), "--station", str(files / "station.yaml"), "--no-connect"])
    assert code == exitcodes.INVALID and time.monotonic() - t0 < 10.0
    assert "bigscan.yaml" in capsys.readouterr().out


@pytest.mark.parametrize("value, fragment", [
    ("frames=[1,", "--set frames:1:4: YAML syntax error"),
    ("frames", "--set frames: expected NAME=VALUE"),
])
def test_bad_set_values_exit_2(value: str, fragment: str, capsys) -> None:
    assert main(["check", "distortion-grid", "--no-connect", "--set", value]) == exitcodes.INVALID
    assert fragment in capsys.readouterr().out


def test_runs_pointing_at_a_file(files: Path, tmp_path: Path, capsys) -> None:
    runs = tmp_path / "runs.txt"
    runs.write_text("not a folder")
    assert _run(files, runs) == exitcodes.INVALID
    assert "is a file, not a folder" in capsys.readouterr().out


def test_analyze_on_an_interrupted_run(complete_run: Path, tmp_path: Path, capsys) -> None:
    run = _interrupted_copy(complete_run, tmp_path, keep_steps=1)
    assert main(["analyze", "distortion", str(run)]) == exitcodes.INVALID
    assert "the run did not finish (its manifest says running)" in capsys.readouterr().out


@pytest.mark.parametrize("speed", ["nan", "inf", "0", "-3"])
def test_realtime_must_be_a_finite_positive_speed(speed: str, files: Path, tmp_path: Path,
                                                  capsys) -> None:
    with pytest.raises(SystemExit) as stop:
        _run(files, tmp_path / "runs", "--realtime", speed)
    assert stop.value.code == exitcodes.INVALID
    assert "give a finite speed above 0" in capsys.readouterr().err
    assert not (tmp_path / "runs").exists()


def test_uut_narrower_than_the_camera_is_refused(files: Path, tmp_path: Path, capsys) -> None:
    uut = tmp_path / "uut.yaml"
    uut.write_text((REPO / "station" / "data" / "demo_uut.yaml").read_text().replace(
        "width: 640", "width: 320"))
    code = _run(files, tmp_path / "runs", "--uut", str(uut))
    assert code == exitcodes.INVALID
    assert "the UUT file says 320 x 512 px" in capsys.readouterr().out
    assert not (tmp_path / "runs").exists() or not any((tmp_path / "runs").iterdir())


@pytest.mark.parametrize("bad", [np.nan, np.inf])
def test_frame_holding_nan_or_inf(bad: float, tmp_path: Path, capsys) -> None:
    frame = tmp_path / "frame.tif"
    data = np.full((512, 640), 1000.0, np.float32)
    data[100, 200] = bad
    tifffile.imwrite(frame, data)
    code = main(["analyze", "distortion", "--frame", str(frame), "--geometry",
                 str(REPO / "station" / "data" / "example_geometry.yaml"), "--out",
                 str(tmp_path / "out")])
    assert code == exitcodes.INVALID
    assert "1 pixel(s) are NaN or infinite" in capsys.readouterr().out


def test_unexpected_error_is_one_line_unless_debug(monkeypatch, capsys) -> None:
    from station.cli import commands

    def broken(args, console):
        raise KeyError("boom")

    monkeypatch.setattr(commands, "cmd_recipes", broken)
    assert main(["recipes"]) == exitcodes.FAULTED
    out = capsys.readouterr().out
    assert out.count("\n") == 1 and "Internal error: KeyError" in out and "--debug" in out
    with pytest.raises(KeyError):
        main(["--debug", "recipes"])


# -- 7. reproducible resume -------------------------------------------------------------------------
def test_resume_restarts_simulated_time_when_the_interrupted_step_began(complete_run: Path,
                                                                       tmp_path: Path) -> None:
    run = _interrupted_copy(complete_run, tmp_path, keep_steps=2)
    events = [json.loads(x) for x in (run / "events.jsonl").read_text().splitlines()]
    began = [e["t"] for e in events if e["type"] == "step.start" and e["step"] == "s3.capture"]
    last = events[-1]["t"]
    assert main(["resume", str(run), "--plain"]) == exitcodes.OK
    events = [json.loads(x) for x in (run / "events.jsonl").read_text().splitlines()]
    (resumed,) = [e for e in events if e["type"] == "resume.start"]
    assert resumed["step_began_at"] == began[0] < last  # not "the last logged time + 1 s"
    assert resumed["t"] == pytest.approx(began[0], abs=1e-6)


def test_capture_refuses_a_frame_holding_nan(tmp_path: Path) -> None:
    from drivers.interfaces import Frame
    from station.record.frame_store import CaptureWriter, FrameStoreError

    writer = CaptureWriter(tmp_path / "frames", "s1.capture", "flat", keep="average")
    data = np.full((4, 5), 100.0)
    data[2, 3] = np.nan
    with pytest.raises(FrameStoreError, match="frame 7 holds 1 NaN or infinite pixel"):
        writer.add(Frame(data=data, counter=7, timestamp=0.0))
    writer.abandon("test")


def test_writer_lock_names_its_holder_and_is_gone_when_released(tmp_path: Path) -> None:
    import socket

    from station.record.writer_lock import LOCK_NAME, RunFolderBusy, WriterLock

    first = WriterLock.acquire(tmp_path, "resume")
    with pytest.raises(RunFolderBusy, match=f"nightbench resume \\(pid {os.getpid()} on host "
                                            f"{socket.gethostname()}, since 20"):
        WriterLock.acquire(tmp_path, "run")
    first.release()
    assert not (tmp_path / LOCK_NAME).exists()
    with WriterLock.acquire(tmp_path, "run") as again:
        assert again.held


def test_closing_manifest_uses_the_disk_reserve_when_the_disk_is_full(complete_run: Path,
                                                                     tmp_path: Path,
                                                                     monkeypatch) -> None:
    import errno

    from drivers.clock import SimClock
    from station.record import closing
    from station.record.manifest import Manifest, load_manifest
    from station.record.runfolder import RunFolder

    run_path = _interrupted_copy(complete_run, tmp_path, keep_steps=3)
    closing.make_reserve(run_path)
    run = RunFolder.open(run_path)
    manifest = load_manifest(run_path)
    real = Manifest.close
    calls = []

    def close(self, path, **kw):  # full until the reserve is given back
        calls.append((run_path / closing.RESERVE_NAME).exists())
        if len(calls) == 1:
            raise OSError(errno.ENOSPC, "No space left on device")
        return real(self, path, **kw)

    monkeypatch.setattr(Manifest, "close", close)
    closing.close_manifest(run, manifest, "faulted", "test cause", SimClock())
    assert calls == [False, False]  # the reserve went before the first try
    final = load_manifest(run_path)
    assert final.state == "faulted" and "the disk is full" in final.cause


def test_simulate_refuses_a_station_that_is_not_simulated(capsys) -> None:
    lab = REPO / "station" / "data" / "example_lab_station.yaml"
    assert main(["simulate", "--station", str(lab)]) == exitcodes.INVALID
    assert "not a simulated station" in capsys.readouterr().out


def test_check_also_refuses_a_uut_format_that_is_not_the_cameras(tmp_path: Path, capsys) -> None:
    uut = tmp_path / "uut.yaml"
    uut.write_text((REPO / "station" / "data" / "demo_uut.yaml").read_text().replace(
        "height: 512", "height: 256"))
    assert main(["check", "distortion-grid", "--uut", str(uut), "--no-connect"]) == \
        exitcodes.INVALID
    assert "the UUT file says 640 x 256 px" in capsys.readouterr().out
