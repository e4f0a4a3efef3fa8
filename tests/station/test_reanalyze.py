"""`nightbench analyze distortion` on a run folder and on a standalone frame; replayed frames.

References: the run's own results (re-analysis must reproduce them: same frames, same code, so
the same numbers to rounding, 1e-9) and the simulated camera's truth file for the standalone frame
(k1 within 4 sigma of the fit's reported uncertainty, as in test_distortion_e2e). Runs use
simulated time; one recorded run (kept as stack and average) serves every test of this file.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import tifffile
import yaml

from sequences.library import find_recipe
from station.cli.main import main
from station.inputs.config import BUILTIN_DIR
from station.inputs.geometry_file import example_geometry_path, load_geometry
from station.analyses.reanalyze import analyze_frame_file, analyze_run_folder

SAME = 1e-9  # same input and code: only float rounding may differ
MODEL_KEYS = ("k1", "k2", "p1", "p2", "fx_px", "fy_px", "cx_px", "cy_px")
DISTORTION_PLOTS = ["distortion_map.svg", "distortion_radial.svg", "distortion_residual.svg"]


def _distortion(folder: Path) -> dict[str, Any]:
    return json.loads((folder / "distortion.json").read_text(encoding="utf-8"))


def _run(recipe: Path, runs: Path, *extra: str) -> Path:
    code = main(["run", str(recipe), "--runs", str(runs), "--plain", *extra])
    assert code == 0
    (folder,) = [p for p in runs.iterdir() if p.is_dir()]
    return folder


@pytest.fixture(scope="module")
def recipe(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The built-in grid recipe keeping the stack too, so its frames can be replayed."""
    text = find_recipe("distortion-grid").read_text(encoding="utf-8")
    assert "keep: average" in text
    path = tmp_path_factory.mktemp("recipe") / "grid_both.yaml"
    path.write_text(text.replace("keep: average", "keep: both"), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def grid_run(recipe: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    return _run(recipe, tmp_path_factory.mktemp("runs"))


def test_reanalysis_of_run_folder_reproduces_its_results(grid_run: Path, tmp_path: Path) -> None:
    out = tmp_path / "again"
    assert main(["analyze", "distortion", str(grid_run), "--out", str(out)]) == 0
    original, again = _distortion(grid_run / "results"), _distortion(out)
    for key in MODEL_KEYS:
        assert again["model"][key] == pytest.approx(original["model"][key], abs=SAME), key
    assert again["summary"]["classification"] == original["summary"]["classification"]
    assert again["summary"]["defect_labels"] == original["summary"]["defect_labels"]
    assert (out / "distortion_points.csv").is_file()
    assert sorted(p.name for p in (out / "plots").glob("*.svg")) == sorted(
        p.name for p in (grid_run / "plots").glob("*.svg")) == DISTORTION_PLOTS


def test_reanalysis_writes_a_new_version_and_leaves_the_run_alone(grid_run: Path) -> None:
    before = (grid_run / "results" / "distortion.json").read_bytes()
    report = analyze_run_folder(grid_run, "distortion")
    summary = report.summary
    assert report.results_dir == grid_run / "reanalysis" / "1" / "results"
    original = json.loads(before)
    assert summary["k1"] == pytest.approx(original["model"]["k1"], abs=SAME)
    assert summary["classification"] == original["summary"]["classification"]
    assert _distortion(report.results_dir)["model"]["k1"] == pytest.approx(summary["k1"], abs=SAME)
    assert (grid_run / "results" / "distortion.json").read_bytes() == before
    assert analyze_run_folder(grid_run, "distortion").results_dir.parent.name == "2"


def test_standalone_frame_gives_the_runs_k1(grid_run: Path, tmp_path: Path) -> None:
    frame = grid_run / "frames" / "grid.avg.tif"
    out = tmp_path / "standalone"
    code = main(["analyze", "distortion", "--frame", str(frame), "--geometry",
                 str(example_geometry_path()), "--out", str(out)])
    assert code == 0
    run_model, alone = _distortion(grid_run / "results")["model"], _distortion(out)
    # The example geometry file describes the same bench and nominal camera as the run's files.
    for key in MODEL_KEYS:
        assert alone["model"][key] == pytest.approx(run_model[key], abs=SAME), key
    truth = yaml.safe_load((BUILTIN_DIR / "demo_camera_truth.yaml").read_text(encoding="utf-8"))
    k1_truth = truth["geometry"]["distortion"]["k1"]
    assert abs(alone["model"]["k1"] - k1_truth) <= 4 * alone["model"]["uncertainty"]["k1"]
    assert (out / "distortion_points.csv").is_file()
    assert sorted(p.name for p in out.glob("*.svg")) == DISTORTION_PLOTS
    assert not list(out.glob("*.png"))


def test_standalone_frame_with_plots_imports_no_plotting_library(grid_run: Path,
                                                                 tmp_path: Path) -> None:
    # A fresh process (as `nightbench analyze distortion --frame` is): after the whole command,
    # plots included, matplotlib must not be loaded (its import alone costs about a second).
    import subprocess
    import sys

    out = tmp_path / "fresh"
    code = ("import sys\n"
            "from station.cli.main import main\n"
            f"rc = main(['analyze', 'distortion', '--frame', {str(grid_run / 'frames' / 'grid.avg.tif')!r},"
            f" '--geometry', {str(example_geometry_path())!r}, '--out', {str(out)!r}])\n"
            "print(rc, sorted(m for m in sys.modules if m.split('.')[0] == 'matplotlib'))\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          cwd=Path(__file__).resolve().parents[2], timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip().splitlines()[-1] == "0 []"
    assert sorted(p.name for p in out.glob("*.svg")) == DISTORTION_PLOTS


def test_standalone_stack_is_averaged(grid_run: Path, tmp_path: Path) -> None:
    # Averaging identical float32 pages in float64 is exact (IEEE 754): the same k1 follows.
    image = tifffile.imread(grid_run / "frames" / "grid.avg.tif")
    stack_path = tmp_path / "stack.tif"
    tifffile.imwrite(stack_path, np.stack([image] * 3), photometric="minisblack")
    summary = analyze_frame_file(stack_path, example_geometry_path(), tmp_path / "out")
    original = _distortion(grid_run / "results")["model"]["k1"]
    assert summary["k1"] == pytest.approx(original, abs=SAME)


def test_geometry_typo_exits_2_naming_file_and_line(grid_run: Path, tmp_path: Path,
                                                     capsys: pytest.CaptureFixture[str]) -> None:
    text = example_geometry_path().read_text(encoding="utf-8")
    lines = text.splitlines()
    (line_no,) = [i + 1 for i, line in enumerate(lines) if line.strip().startswith("pitch_mm:")]
    bad = tmp_path / "typo.yaml"
    bad.write_text(text.replace("  pitch_mm:", "  pich_mm:"), encoding="utf-8")
    code = main(["analyze", "distortion", "--frame", str(grid_run / "frames" / "grid.avg.tif"),
                 "--geometry", str(bad), "--out", str(tmp_path / "out")])
    out = " ".join(capsys.readouterr().out.split())
    assert code == 2  # station/cli/exitcodes.py INVALID
    assert f"typo.yaml:{line_no}:" in out
    assert "pich_mm" in out
    assert not (tmp_path / "out" / "distortion.json").exists()


@pytest.mark.parametrize("make, words", [
    (lambda d: d / "missing.tif", "no such frame file"),
    (lambda d: (d / "notes.tif").write_text("not an image") and d / "notes.tif", "not a readable TIFF"),
    (lambda d: tifffile.imwrite(d / "small.tif", np.zeros((100, 80), np.uint16)) or d / "small.tif",
     "100 rows x 80 cols"),
])
def test_bad_frames_are_refused_clearly(tmp_path: Path, make: Any, words: str) -> None:
    frame = make(tmp_path)
    with pytest.raises(ValueError, match=words):
        analyze_frame_file(frame, example_geometry_path(), tmp_path / "out")
    assert main(["analyze", "distortion", "--frame", str(frame), "--geometry",
                 str(example_geometry_path()), "--out", str(tmp_path / "out")]) == 2


def test_example_geometry_matches_the_demo_bench() -> None:
    # The example file must describe the built-in bench (station/data/sim_station.yaml) and the
    # demo camera's data sheet (station/data/demo_uut.yaml), as the README says.
    geom = load_geometry(example_geometry_path())
    station = yaml.safe_load((BUILTIN_DIR / "sim_station.yaml").read_text(encoding="utf-8"))
    uut = yaml.safe_load((BUILTIN_DIR / "demo_uut.yaml").read_text(encoding="utf-8"))
    assert geom.collimator_focal_mm == station["collimator"]["focal_length_mm"]
    assert geom.shape == (uut["format"]["height"], uut["format"]["width"])
    assert geom.nominal.focal_length_mm == uut["optics"]["focal_length_mm"]
    assert geom.nominal.pixel_pitch_um == uut["format"]["pixel_pitch_um"]
    assert geom.saturation == 2 ** uut["bit_depth"] - 1
    assert len(geom.target.points_mm()) == 15 * 11


def test_replayed_frames_give_the_same_results(grid_run: Path, recipe: Path,
                                               tmp_path: Path) -> None:
    """A station whose camera is the TIFF replay driver re-runs the recipe on recorded frames."""
    station = yaml.safe_load((BUILTIN_DIR / "sim_station.yaml").read_text(encoding="utf-8"))
    station["simulation"]["camera_truth"] = str(BUILTIN_DIR / "demo_camera_truth.yaml")
    station["instruments"]["camera"] = {"driver": "tiff-replay", "bit_depth": 14,
                                        "resource": f"replay:{grid_run / 'frames'}"}
    path = tmp_path / "replay_station.yaml"
    path.write_text(yaml.safe_dump(station), encoding="utf-8")
    replay = _run(recipe, tmp_path / "runs", "--station", str(path))
    original, again = _distortion(grid_run / "results"), _distortion(replay / "results")
    # Same frames served page by page, same averaging and analysis: the same numbers.
    for key in MODEL_KEYS:
        assert again["model"][key] == pytest.approx(original["model"][key], abs=SAME), key
    assert again["summary"]["defect_labels"] == original["summary"]["defect_labels"]


def test_not_a_run_folder_is_refused_clearly(tmp_path: Path,
                                             capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(ValueError, match="not a run folder"):
        analyze_run_folder(tmp_path)
    assert main(["analyze", "distortion", str(tmp_path / "nowhere")]) == 2  # exitcodes.INVALID
    assert "no such folder" in " ".join(capsys.readouterr().out.split())


def test_no_plots_writes_the_same_results_and_no_plot(grid_run: Path, tmp_path: Path) -> None:
    frame = str(grid_run / "frames" / "grid.avg.tif")
    geometry = str(example_geometry_path())
    assert main(["analyze", "distortion", "--frame", frame, "--geometry", geometry,
                 "--out", str(tmp_path / "plain"), "--no-plots"]) == 0
    assert not list((tmp_path / "plain").rglob("*.png"))
    assert not list((tmp_path / "plain").rglob("*.svg"))
    # Same frame, same code: the same model as the run's own analysis (reference: the run).
    run_model, alone = _distortion(grid_run / "results")["model"], _distortion(tmp_path / "plain")
    for key in MODEL_KEYS:
        assert alone["model"][key] == pytest.approx(run_model[key], abs=SAME), key
