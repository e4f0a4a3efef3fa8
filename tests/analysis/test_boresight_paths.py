"""Three independent paths to the boresight agree within their uncertainties, and with the truth:
the camera model fitted to one pinhole-grid frame, the model fitted to a pinhole scan, and the
closed-loop alignment (which needs no model at convergence).

Truth: the demo camera (station/data/demo_camera_truth.yaml), the pose that puts the on-axis
pinhole on the detector centre solved with the forward model (geometry_sim.true_aligned_pose).
The fits are analysis.distortion's (checked against OpenCV and the truth in test_distortion_sim).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import yaml

from analysis.alignment import align
from analysis.boresight import boresight_from_model, find_pinhole
from analysis.centroid import centroid_at, detect_spots
from analysis.distortion import analyze_grid, analyze_scan
from analysis.geometry import CameraGeometry, collimator_directions, project, to_camera_frame
from analysis.targets import PinholeGrid, SinglePinhole
from simulators.camera_render import CameraRenderer, SceneState
from simulators.camera_truth import truth_from_mapping
from tests.analysis.geometry_sim import F_COLL, true_aligned_pose

DATA = Path(__file__).resolve().parents[2] / "station" / "data"
NOMINAL = CameraGeometry(640, 512, 17.0, 25.0)   # the data sheet (demo_uut.yaml)
CENTRE = (319.5, 255.5)
GRID = PinholeGrid(rows=11, cols=15, pitch_mm=12.0, diameter_mm=1.0)
PIN = SinglePinhole(diameter_mm=1.0)


def demo_truth():
    t = truth_from_mapping(yaml.safe_load((DATA / "demo_camera_truth.yaml").read_text()))
    return type(t)(**{**t.__dict__, "geometry": t.geometry.replace(defects=())})


def mean_frame(r: CameraRenderer, scene: SceneState, n: int) -> np.ndarray:
    return np.mean([r.render(scene, i).astype(float) for i in range(n)], axis=0)


def test_grid_scan_and_alignment_agree_on_the_boresight() -> None:
    truth = demo_truth()
    r = CameraRenderer(truth, seed=8)
    # Grid path: one averaged frame of the grid at the mount's zero.
    grid_img = mean_frame(r, SceneState(60.0, 20.0, GRID, 0.0, 0.0, F_COLL), 8)
    grid = analyze_grid(detect_spots(grid_img, saturation=truth.full_scale),
                        collimator_directions(GRID.points_mm(), F_COLL), NOMINAL)
    m = grid.model
    by_grid = boresight_from_model(m.geometry, (m.sigma("cx"), m.sigma("cy")), label="grid")
    # Scan path: the single pinhole at 5 x 5 poses.
    poses = np.array([(a, e) for e in np.linspace(-8, 8, 5) for a in np.linspace(-10, 10, 5)])
    beam = collimator_directions(PIN.points_mm(), F_COLL)
    spots = []
    for i, (a, e) in enumerate(poses):
        img = mean_frame(r, SceneState(60.0, 20.0, PIN, a, e, F_COLL), 2)
        x0, y0 = project(NOMINAL, to_camera_frame(beam, a, e))[0]
        spots.append(centroid_at(img, x0, y0, 7, saturation=truth.full_scale))
    scan = analyze_scan(spots, poses, NOMINAL, collimator_focal_mm=F_COLL)
    s = scan.model
    by_scan = boresight_from_model(s.geometry, (s.sigma("cx"), s.sigma("cy")), label="scan")
    # Alignment path: the closed loop from the mount's zero.
    def measure(pose):
        img = mean_frame(r, SceneState(60.0, 20.0, PIN, pose[0], pose[1], F_COLL), 2)
        spot = find_pinhole(img, saturation=truth.full_scale)
        return (spot.x, spot.y), (spot.sigma_x, spot.sigma_y)
    loop = align(measure, (0.0, 0.0), CENTRE, NOMINAL, tolerance_px=0.1)
    paths = {"grid": (np.array(by_grid.boresight_deg), np.array(by_grid.sigma_deg)),
             "scan": (np.array(by_scan.boresight_deg), np.array(by_scan.sigma_deg)),
             "alignment": (np.array([loop.az_deg, loop.el_deg]),
                           np.array([loop.sigma_az_deg, loop.sigma_el_deg]))}
    want = true_aligned_pose(truth.geometry, CENTRE)
    names = list(paths)
    for i, a in enumerate(names):
        va, sa = paths[a]
        # Each against the truth within 3 sigma (GUM k = 3 for a single check) ...
        assert np.all(np.abs(va - want) < 3 * sa), (a, va - want, sa)
        for b in names[i + 1:]:
            vb, sb = paths[b]
            # ... and pairwise within 3 combined sigma (independent noise).
            assert np.all(np.abs(va - vb) < 3 * np.hypot(sa, sb)), (a, b, va - vb)
    # And they are tight: every path better than 0.05 mrad (0.07 px) per axis.
    assert all(np.radians(s_).max() * 1000 < 0.05 for _, s_ in paths.values())
