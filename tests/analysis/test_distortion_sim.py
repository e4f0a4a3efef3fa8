"""Recovery of the simulated camera's known geometry from rendered frames (grid and scan mode).

Ground truth: station/data/demo_camera_truth.yaml through simulators.camera_render (the same
forward model as analysis.geometry, checked against OpenCV in test_geometry). Tolerances are
4 sigma of the fit's own noise-derived uncertainty, plus a floor for the renderer's
single-Gaussian approximation of the pinhole image (its centroid is exact by construction).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import yaml

from analysis.centroid import SpotFlag, centroid_at, detect_spots
from analysis.distortion import analyze_grid, analyze_scan
from analysis.geometry import BrownConrady, CameraGeometry, collimator_directions, project, to_camera_frame
from analysis.targets import PinholeGrid, SinglePinhole
from simulators.camera_render import CameraRenderer, SceneState
from simulators.camera_truth import truth_from_mapping

DATA = Path(__file__).resolve().parents[2] / "station" / "data"
F_COLL = 500.0
GRID = PinholeGrid(rows=11, cols=15, pitch_mm=12.0, diameter_mm=1.0)
NOMINAL = CameraGeometry(640, 512, 17.0, 25.0)  # the data sheet (demo_uut.yaml)


def demo_truth(**geometry_changes):
    t = truth_from_mapping(yaml.safe_load((DATA / "demo_camera_truth.yaml").read_text()))
    if geometry_changes:
        t = type(t)(**{**t.__dict__, "geometry": t.geometry.replace(**geometry_changes)})
    return t


def averaged(renderer, scene, n=16):
    return np.mean([renderer.render(scene, i).astype(np.float64) for i in range(n)], axis=0)


def grid_result(truth, seed=1, spots_out=None):
    r = CameraRenderer(truth, seed=seed)
    scene = SceneState(source_c=60.0, plate_c=20.0, target=GRID, collimator_focal_mm=F_COLL)
    img = averaged(r, scene)
    spots = detect_spots(img, saturation=truth.full_scale)
    if spots_out is not None:
        spots_out.extend(spots)
    dirs = collimator_directions(GRID.points_mm(), F_COLL)
    labels = [f"r{a}c{b}" for a, b in GRID.labels()]
    return analyze_grid(spots, dirs, NOMINAL, labels=labels), r.expected_spots(scene)[0]


def test_demo_camera_grid_recovery():
    truth = demo_truth()
    spots = []
    res, truth_xy = grid_result(truth, spots_out=spots)
    m, g = res.model, truth.geometry
    # The only pinholes left out are those with a dead or hot pixel in their window.
    assert res.n_missing == sum(1 for s in spots if s.flags & SpotFlag.BAD_PIXEL)
    # Expected 165 windows x 49 px x 0.0007 (dead + hot fraction) = 5.7; Poisson 3 sigma -> 13.
    assert res.n_missing <= 13
    # k1 = -0.25 and the boresight (+2.3, -1.6) px (demo_camera_truth.yaml).
    assert m.distortion.k1 == pytest.approx(g.distortion.k1, abs=4 * m.sigma("k1") + 0.005)
    assert res.boresight_offset_px[0] == pytest.approx(2.3, abs=4 * m.sigma("cx") + 0.05)
    assert res.boresight_offset_px[1] == pytest.approx(-1.6, abs=4 * m.sigma("cy") + 0.05)
    assert m.effective_focal_length_mm == pytest.approx(25.08, abs=4 * m.sigma("fx") * 0.017 + 0.005)
    assert res.classification.label == "barrel"
    # The 0.4 px flaw at (470, 140) is flagged, and every flagged point lies within 2.5 sigma
    # of the flaw's 25 px bump.
    flagged = res.points.measured_px[res.points.defect]
    assert len(flagged) >= 1
    assert np.all(np.hypot(flagged[:, 0] - 470.0, flagged[:, 1] - 140.0) < 2.5 * 25.0)
    # Centroids against the renderer's exact truth positions: well under 0.05 px RMS.
    err = res.points.measured_px - truth_xy
    assert float(np.sqrt(np.nanmean(np.sum(err ** 2, axis=1)))) < 0.05


@pytest.mark.parametrize("dist,label", [
    (BrownConrady(k1=0.20), "pincushion"),
    # Sign change at r = sqrt(0.2 / 4) = 0.22 inside the 0.28 half-diagonal of the 25 mm lens.
    (BrownConrady(k1=-0.20, k2=4.0), "mustache"),
])
def test_variants_recover_k1_and_class_without_false_defects(dist, label):
    truth = demo_truth(distortion=dist, defects=())
    res, _ = grid_result(truth, seed=3)
    m = res.model
    assert res.classification.label == label
    assert m.distortion.k1 == pytest.approx(dist.k1, abs=4 * m.sigma("k1") + 0.005)
    assert not res.points.defect.any()


def test_scan_mode_agrees_with_grid_mode():
    truth = demo_truth(defects=())
    grid, _ = grid_result(truth)
    r = CameraRenderer(truth, seed=5)
    az = np.linspace(-5.5, 5.5, 11)
    el = np.linspace(-4.4, 4.4, 9)
    poses = np.array([(a, e) for e in el for a in az])
    pin = SinglePinhole(diameter_mm=1.0)
    beam = collimator_directions(pin.points_mm(), F_COLL)
    found = []
    for i, (a, e) in enumerate(poses):
        scene = SceneState(source_c=60.0, plate_c=20.0, target=pin, az_deg=a, el_deg=e, collimator_focal_mm=F_COLL)
        img = averaged(r, scene, n=4)
        x0, y0 = project(NOMINAL, to_camera_frame(beam, a, e))[0]
        found.append(centroid_at(img, x0, y0, 7, saturation=truth.full_scale))
    scan = analyze_scan(found, poses, NOMINAL, collimator_focal_mm=F_COLL)
    both = np.hypot(grid.model.sigma("k1"), scan.model.sigma("k1"))
    assert scan.model.distortion.k1 == pytest.approx(grid.model.distortion.k1, abs=4 * both + 0.005)
    assert scan.classification.label == grid.classification.label == "barrel"
    assert not scan.points.defect.any()
