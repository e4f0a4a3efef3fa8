"""Boresight from the on-axis pinhole, checked against the simulated camera's truth.

Truth: the stage pose that puts the on-axis pinhole on the reference pixel in the *true* camera,
solved numerically with the forward model (tests/analysis/geometry_sim.true_aligned_pose); the
analysis only knows the nominal model (the data sheet) and the frame.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from analysis.alignment import aligned_pose
from analysis.boresight import (PinholeNotFound, boresight_from_spot, boresight_shift,
                                boresight_verdicts, measure_boresight)
from analysis.geometry import CameraGeometry
from analysis.targets import PinholeGrid
from simulators.camera_render import CameraRenderer
from tests.analysis.geometry_sim import (frame, renderer_for, spot_at, true_aligned_pose,
                                        truth_camera)

# A 96 x 80 window of the demo camera (17 um, 25 mm): principal point +2.3 / -1.6 px off the
# detector centre and 0.15 deg of roll, as in station/data/demo_camera_truth.yaml.
TRUE = CameraGeometry(96, 80, 17.0, 25.0, cx=47.5 + 2.3, cy=39.5 - 1.6, roll_deg=0.15)
NOMINAL = CameraGeometry(96, 80, 17.0, 25.0)
CENTRE = (47.5, 39.5)


def test_boresight_recovered_within_two_sigma_over_twenty_seeds() -> None:
    # A single frame converts the offset through the model, so the model's errors scale with the
    # offset: an unknown 0.15 deg roll on a 2.8 px offset is 0.007 px, as large as the noise
    # (0.007 px). The model here is the fitted one (roll known, as a distortion fit gives it);
    # the closed loop (test_alignment) drives the offset to zero and needs no such help.
    fitted = NOMINAL.replace(roll_deg=0.15)
    truth = truth_camera(TRUE)
    want = true_aligned_pose(TRUE, CENTRE)
    pulls = []
    for seed in range(20):
        img = frame(renderer_for(TRUE, seed), 0.0, 0.0)
        m = measure_boresight(img, fitted, (0.0, 0.0), saturation=truth.full_scale)
        pulls.append((np.array(m.boresight_deg) - want) / np.array(m.sigma_deg))
    pulls = np.array(pulls)
    # Honest 1-sigma (GUM, JCGM 100:2008): about 95 % of the pulls within 2 sigma; allow 2 of 20
    # per axis outside (binomial, p = 0.05: P(>2 of 20) = 7.5 %; both axes are checked jointly).
    assert (np.abs(pulls) > 2.0).sum(axis=0).max() <= 2, pulls
    # Unit spread of the pulls (common practice): RMS within its chi-square 99 % band for 20 dof.
    rms = np.sqrt((pulls ** 2).mean(axis=0))
    assert np.all((rms > 0.55) & (rms < 1.45)), rms
    # The mean over 20 seeds is unbiased within 2 sigma of the mean.
    assert np.all(np.abs(pulls.mean(axis=0)) < 2.0 / math.sqrt(20) * 1.45), pulls.mean(axis=0)


def test_boresight_error_is_the_angle_not_pixels_times_ifov_on_a_wide_f_theta_lens() -> None:
    # f-theta lens of 4 mm on 17 um: 160 deg across 640 px. Pinhole seen 200 px off centre at
    # pose (20, -15) deg. Outside reference: the forward model solved numerically.
    wide = CameraGeometry(640, 512, 17.0, 4.0, projection="equidistant", cx=330.0, cy=250.0)
    nominal = wide.replace(cx=None, cy=None)
    spot = spot_at(wide, 20.0, -15.0)
    m = boresight_from_spot(spot, (0.05, 0.05), wide, (20.0, -15.0))
    want = true_aligned_pose(wide, ((640 - 1) / 2, (512 - 1) / 2))
    assert m.boresight_deg == pytest.approx(tuple(want), abs=1e-8)
    # The small-angle shortcut (pose + offset x IFOV) would be wrong by degrees here.
    shortcut = np.array([20.0, -15.0]) + np.degrees(
        np.array([-1.0, 1.0]) * (spot - (319.5, 255.5)) * nominal.ifov_mrad / 1000.0)
    assert np.abs(shortcut - want).max() > 1.0
    # The error is the angle of the line of sight from the axis at zero: acos(cos az cos el).
    assert m.error_mrad == pytest.approx(
        1000 * math.acos(math.cos(math.radians(want[0])) * math.cos(math.radians(want[1]))),
        rel=1e-9)


def test_reference_pixel_from_the_uut_file_moves_the_boresight_by_its_angle() -> None:
    spot = spot_at(TRUE, 0.0, 0.0)
    centre = boresight_from_spot(spot, (0.02, 0.02), NOMINAL)
    ref = (57.5, 39.5)  # 10 px to the right: 10 x 0.68 mrad = 6.8 mrad less azimuth to align
    shifted = boresight_from_spot(spot, (0.02, 0.02), NOMINAL, reference_px=ref)
    delta = np.subtract(centre.boresight_mrad, shifted.boresight_mrad)
    # IFOV = p / f (Smith); atan for the exact rectilinear angle: 10 px x 17 um / 25 mm.
    assert delta[0] == pytest.approx(1000 * math.atan(10 * 0.017 / 25.0), rel=1e-3)
    assert abs(delta[1]) < 0.01


def test_boresight_shift_between_two_mountings_matches_the_moved_principal_point() -> None:
    # A re-mount that moves the principal point by 3 px right and 4 px down: 5 px x IFOV.
    moved = TRUE.replace(cx=TRUE.cx + 3.0, cy=TRUE.cy + 4.0)
    ms = []
    for geom, seed in ((TRUE, 1), (moved, 2), (TRUE, 3)):
        truth = truth_camera(geom)
        img = frame(renderer_for(geom, seed), 0.0, 0.0)
        ms.append(measure_boresight(img, NOMINAL, saturation=truth.full_scale))
    shift = boresight_shift(ms)
    want = 1000 * math.atan(5 * 0.017 / 25.0)  # 3.4 mrad (paraxial, Smith)
    assert abs(shift.max_shift_mrad - want) < 3 * shift.sigma_mrad + 0.002
    verdicts = boresight_verdicts({"max_boresight_error_mrad": 2.5,
                                   "max_boresight_shift_mrad": 1.0}, ms[0], shift)
    by_key = {v.key: v for v in verdicts}
    assert by_key["max_boresight_error_mrad"].status == "PASS"   # 1.9 mrad +/- 0.02
    assert by_key["max_boresight_shift_mrad"].status == "FAIL"   # 3.4 mrad


def test_no_pinhole_when_the_blackbody_is_off_or_a_grid_is_in_the_beam() -> None:
    truth = truth_camera(TRUE)
    r = CameraRenderer(truth, seed=5)
    with pytest.raises(PinholeNotFound, match="no pinhole image"):
        measure_boresight(frame(r, 0.0, 0.0, source_c=20.0), NOMINAL)   # source at plate: off
    grid = PinholeGrid(rows=3, cols=3, pitch_mm=6.0, diameter_mm=1.0)  # 17.6 px apart
    with pytest.raises(PinholeNotFound, match="spots in the frame"):
        measure_boresight(frame(r, 0.0, 0.0, target=grid), NOMINAL)


def test_aligned_pose_inverts_the_forward_model_for_every_projection() -> None:
    for projection in ("rectilinear", "equidistant", "stereographic", "equisolid", "orthographic"):
        geom = CameraGeometry(640, 512, 17.0, 6.0, projection=projection, cx=300.0, cy=270.0,
                              roll_deg=1.0)
        for pose in ((0.0, 0.0), (15.0, -10.0), (-25.0, 20.0)):
            spot = spot_at(geom, *pose)
            back = aligned_pose(spot, spot, pose, geom)   # the spot is where it is: same pose
            assert back == pytest.approx(pose, abs=1e-9), projection
