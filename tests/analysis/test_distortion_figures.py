"""The reported figures estimate the lens, not the noise; their sigmas are honest.

Frames come from the simulated camera (simulators.camera_render: pixel-integrated Gaussian
spots at the exact positions of analysis.geometry's forward model, checked against OpenCV in
test_geometry; fixed-pattern noise, bad pixels and temporal noise of the demo camera) and go
through analysis.distortion_frames.distortion_from_grid_frame, the function `nightbench analyze
distortion --frame` calls. The truth is the simulator's camera (station/data/demo_camera_truth.yaml).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import yaml

from analysis.distortion_figures import local_distortion_percent
from analysis.distortion_frames import distortion_from_grid_frame
from analysis.geometry import BrownConrady, CameraGeometry
from analysis.targets import PinholeGrid
from simulators.camera_render import CameraRenderer, SceneState
from simulators.camera_truth import truth_from_mapping

DATA = Path(__file__).resolve().parents[2] / "station" / "data"
F_COLL = 500.0
GRID = PinholeGrid(rows=11, cols=15, pitch_mm=12.0, diameter_mm=1.0)
NOMINAL = CameraGeometry(640, 512, 17.0, 25.0)  # the data sheet (demo_uut.yaml)
SCENE = SceneState(source_c=60.0, plate_c=20.0, target=GRID, collimator_focal_mm=F_COLL)


def demo_truth(**geometry_changes):
    t = truth_from_mapping(yaml.safe_load((DATA / "demo_camera_truth.yaml").read_text()))
    return type(t)(**{**t.__dict__, "geometry": t.geometry.replace(**geometry_changes)})


def frames(truth, seeds, n_avg=4):
    """A camera per seed: its own fixed pattern and bad pixels, and its own temporal noise."""
    for s in seeds:
        # the fixed pattern and bad pixels come from the truth's own seed: one camera per seed
        camera = type(truth)(**{**truth.__dict__, "seed": 100 + s})
        r = CameraRenderer(camera, seed=100 + s)
        yield np.mean([r.render(SCENE, i).astype(np.float64) for i in range(n_avg)], axis=0)


def analyse(img, truth):
    return distortion_from_grid_frame(img, GRID.points_mm(), F_COLL, NOMINAL, saturation=truth.full_scale)


@pytest.mark.parametrize("skew_deg", [0.0, 0.4])
def test_no_distortion_reads_none_and_zero_within_two_sigma(skew_deg):
    """Zero distortion (and a pure skew of the pixel axes, which is not distortion): over 20 noise
    seeds the maximum is within 2 sigma of zero (a Gaussian estimate falls there with p = 0.954;
    binomial: at least 17 of 20 with probability 0.98) and always within 3.5 sigma; the class is
    'none' every time; the skew is reported within 4 sigma."""
    truth = demo_truth(distortion=BrownConrady(), defects=(), skew_deg=skew_deg)
    within2, worst = 0, 0.0
    for img in frames(truth, range(20)):
        res = analyse(img, truth)
        z = abs(res.max_distortion_percent) / res.max_distortion_sigma_percent
        within2 += z <= 2.0
        worst = max(worst, z)
        assert res.classification.label == "none", res.classification.reason
        assert res.model.geometry.skew_deg == pytest.approx(skew_deg, abs=4 * res.model.sigma("skew") + 1e-3)
        # The worst single point is reported apart, with its own sigma.
        assert np.isfinite(res.worst_point_percent) and res.worst_point_sigma_percent > 0
    assert within2 >= 17, within2
    assert worst < 3.5, worst


def test_demo_camera_k1_on_19_of_20_seeds():
    """k1 = -0.25 (truth file) within 0.005 (the issue's tolerance) on >= 19 of 20 seeds at the
    demo camera's default noise, 16 frames averaged as the distortion-grid recipe does."""
    truth = demo_truth()
    g = truth.geometry
    hits = 0
    for img in frames(truth, range(20), n_avg=16):
        res = analyse(img, truth)
        hits += abs(res.model.distortion.k1 - g.distortion.k1) <= 0.005
        assert res.classification.label == "barrel"
    assert hits >= 19, hits


def test_pulls_have_unit_spread():
    """Over 50 seeds, (estimate - truth) / reported sigma of every figure a verdict uses has a
    spread within 30 % of 1 (pull distribution; GUM JCGM 100:2008 for the propagation; the
    standard error of a standard deviation from 50 samples is 10 %, so 30 % is 3 of them).
    The truth camera has k1 only (no terms for the F-test to trade), no local defect. Frames are
    full renders of the simulated camera (a new fixed pattern and temporal noise each)."""
    truth = demo_truth(distortion=BrownConrady(k1=-0.25), defects=())
    g = truth.geometry
    pulls: dict[str, list[float]] = {k: [] for k in ("k1", "cx", "cy", "fx", "max", "corner")}
    for img in frames(truth, range(50), n_avg=1):
        res = analyse(img, truth)
        m = res.model
        pulls["k1"].append((m.distortion.k1 - g.distortion.k1) / m.sigma("k1"))
        pulls["cx"].append((m.cx - g.principal_point[0]) / m.sigma("cx"))
        pulls["cy"].append((m.cy - g.principal_point[1]) / m.sigma("cy"))
        pulls["fx"].append((m.fx - g.fx) / m.sigma("fx"))
        # Maximum: the truth model's local distortion at the place the result names.
        at = np.array(res.max_distortion_at_px)
        xn = np.array([[(at[0] - g.principal_point[0]) / g.fx, (at[1] - g.principal_point[1]) / g.fy]])
        xn = np.array([[*_undistort(xn[0], g.distortion)]])
        true_max = float(local_distortion_percent(g.distortion, xn)[0])
        pulls["max"].append((res.max_distortion_percent - true_max) / res.max_distortion_sigma_percent)
        c = res.corners[0]  # top-left corner: truth radial distortion there
        cn = np.array([(c.x_px - g.principal_point[0]) / g.fx, (c.y_px - g.principal_point[1]) / g.fy])
        r = np.hypot(*_undistort(cn, g.distortion))
        true_c = 100 * g.distortion.k1 * r * r
        pulls["corner"].append((c.distortion_percent - true_c) / c.sigma_percent)
    for name, p in pulls.items():
        spread = float(np.std(p, ddof=1))
        print(f"pull {name}: spread {spread:.2f}, mean {float(np.mean(p)):+.2f}")
        assert 0.7 <= spread <= 1.3, (name, spread, float(np.mean(p)))
        # And no bias beyond 3 standard errors of the mean (3 / sqrt(50) = 0.42) plus the spread.
        assert abs(float(np.mean(p))) < 0.42 * max(1.0, spread) + 0.3, (name, float(np.mean(p)))


def _undistort(xy, d: BrownConrady):
    """Undistorted normalized point of a distorted one (fixed point, as cv2.undistortPoints)."""
    x, y = xy
    u, v = x, y
    for _ in range(50):
        r2 = u * u + v * v
        f = 1 + r2 * (d.k1 + r2 * (d.k2 + r2 * d.k3))
        u, v = x / f, y / f
    return u, v
