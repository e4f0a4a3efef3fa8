"""Distortion end to end from the station side: `nightbench run` on the simulated bench.

The reference is the simulated camera's truth file (station/data/demo_camera_truth.yaml): the
analysis never reads it, so comparing with it checks the whole chain (render, capture, averaged
frame, centroids, fit). Tolerances come from the fit's own reported 1-sigma uncertainties
(least-squares covariance scaled by the reduced chi-square, as in Press et al., Numerical Recipes,
3rd ed., section 15.4), never from the result itself. Runs use simulated time (SimClock).
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path
from typing import Any

import pytest
import yaml

from simulators.camera_truth import CameraTruth, truth_from_mapping
from station.cli.main import main
from station.inputs.config import BUILTIN_DIR

SIGMAS = 4.0  # coverage factor: a 4-sigma miss of a Gaussian estimate has odds ~6e-5


def _truth(path: Path = BUILTIN_DIR / "demo_camera_truth.yaml") -> CameraTruth:
    return truth_from_mapping(yaml.safe_load(path.read_text(encoding="utf-8")))


def run_recipe(recipe: str, runs: Path, *extra: str) -> Path:
    """Run a built-in recipe in process on the simulated bench; return its run folder."""
    code = main(["run", recipe, "--runs", str(runs), "--plain", *extra])
    assert code == 0, f"{recipe} ended with exit code {code}"
    (folder,) = [p for p in runs.iterdir() if p.is_dir()]
    return folder


def results(run: Path) -> dict[str, Any]:
    return json.loads((run / "results" / "distortion.json").read_text(encoding="utf-8"))


def points(run: Path) -> list[dict[str, str]]:
    with open(run / "results" / "distortion_points.csv", newline="", encoding="utf-8") as f:
        return list(csv.DictReader(f))


@pytest.fixture(scope="module")
def grid_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return run_recipe("distortion-grid", tmp_path_factory.mktemp("grid"))


def test_grid_recovers_demo_k1_and_classification(grid_run: Path) -> None:
    truth = _truth().geometry
    data = results(grid_run)
    k1, sigma = data["model"]["k1"], data["model"]["uncertainty"]["k1"]
    # Reference: the truth file's k1 (Brown-Conrady, OpenCV convention) within 4 sigma of the fit.
    assert 0 < sigma < 0.02
    assert abs(k1 - truth.distortion.k1) <= SIGMAS * sigma, (k1, sigma)
    # Barrel: negative k1 pulls points inwards (Brown 1966; the trade's definition).
    assert data["summary"]["classification"] == "barrel"
    assert data["model"]["opencv_dist_coeffs"][0] == pytest.approx(k1, abs=1e-12)


def test_grid_boresight_offset_matches_truth(grid_run: Path) -> None:
    truth = _truth().geometry
    data = results(grid_run)
    # Detector centre of a W x H array in pixel-centre coordinates is ((W-1)/2, (H-1)/2)
    # (common practice; OpenCV's pixel-centre convention).
    centre = ((truth.width - 1) / 2.0, (truth.height - 1) / 2.0)
    expected = (truth.cx - centre[0], truth.cy - centre[1])
    got = data["summary"]["boresight_offset_px"]
    # 0.1 px stated bound; the fit's sigma on cx, cy is a few thousandths of a pixel.
    assert got[0] == pytest.approx(expected[0], abs=0.1)
    assert got[1] == pytest.approx(expected[1], abs=0.1)


def test_grid_flags_the_local_defect_and_nothing_else(grid_run: Path) -> None:
    (defect,) = _truth().geometry.defects
    flagged = [p for p in points(grid_run) if p["defect"] == "1"]
    assert flagged, "the truth's local defect was not flagged"
    # The truth defect is a Gaussian bump of sigma_px: a point at distance d moves by
    # amplitude * exp(-d^2 / (2 sigma^2)). Beyond 3 sigma that is under 1.2 % of 0.4 px
    # (0.005 px), well below the ~0.02 px centroid noise, so no flag may sit that far out.
    for p in flagged:
        d = math.hypot(float(p["measured_x_px"]) - defect.x_px,
                       float(p["measured_y_px"]) - defect.y_px)
        assert d <= 3 * defect.sigma_px, f"spurious defect flag at {p['label']} ({d:.0f} px away)"
    nearest = min(math.hypot(float(p["measured_x_px"]) - defect.x_px,
                             float(p["measured_y_px"]) - defect.y_px) for p in flagged)
    assert nearest <= defect.sigma_px


def test_scan_mode_agrees_with_grid_mode(grid_run: Path, tmp_path: Path) -> None:
    scan = results(run_recipe("distortion-scan", tmp_path))
    grid = results(grid_run)
    k_scan, s_scan = scan["model"]["k1"], scan["model"]["uncertainty"]["k1"]
    k_grid, s_grid = grid["model"]["k1"], grid["model"]["uncertainty"]["k1"]
    # Same camera, independent measurements: difference within 3 combined sigma
    # (root-sum-square of independent standard errors, GUM JCGM 100:2008 section 5.1).
    assert abs(k_scan - k_grid) <= 3 * math.hypot(s_scan, s_grid), (k_scan, s_scan, k_grid)
    assert abs(k_scan - _truth().geometry.distortion.k1) <= SIGMAS * s_scan
    assert scan["summary"]["mode"] == "scan"
    assert scan["summary"]["classification"] == "barrel"


def _pincushion_station(tmp_path: Path, k1: float) -> Path:
    """A copy of the simulated station whose camera has k1 > 0 and no local defect."""
    truth = yaml.safe_load((BUILTIN_DIR / "demo_camera_truth.yaml").read_text(encoding="utf-8"))
    truth["geometry"]["distortion"].update({"k1": k1, "k2": 0.0})
    truth["geometry"]["defects"] = []
    truth_path = tmp_path / "pincushion_truth.yaml"
    truth_path.write_text(yaml.safe_dump(truth), encoding="utf-8")
    station = yaml.safe_load((BUILTIN_DIR / "sim_station.yaml").read_text(encoding="utf-8"))
    station["simulation"]["camera_truth"] = str(truth_path)
    station_path = tmp_path / "pincushion_station.yaml"
    station_path.write_text(yaml.safe_dump(station), encoding="utf-8")
    return station_path


def test_pincushion_variant_is_classified_pincushion(tmp_path: Path) -> None:
    k1_truth = 0.2
    station = _pincushion_station(tmp_path, k1_truth)
    run = run_recipe("distortion-grid", tmp_path / "runs", "--station", str(station))
    data = results(run)
    k1, sigma = data["model"]["k1"], data["model"]["uncertainty"]["k1"]
    assert abs(k1 - k1_truth) <= SIGMAS * sigma, (k1, sigma)
    # Pincushion: positive k1 pushes points outwards (Brown 1966; the trade's definition).
    assert data["summary"]["classification"] == "pincushion"
    assert data["summary"]["max_distortion_percent"] > 0
    # No local defect in this truth: nothing may be flagged.
    assert data["summary"]["n_defects"] == 0, data["summary"].get("defect_labels")
