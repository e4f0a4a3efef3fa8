"""Reference checks of the optical forward model (analysis/geometry.py)."""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from analysis.geometry import (
    BrownConrady,
    CameraGeometry,
    LocalDefect,
    apply_brown_conrady,
    collimator_directions,
    field_angles,
    gimbal_rotation,
    project,
    project_target,
    to_camera_frame,
    undistort_normalized,
)

DEMO = CameraGeometry(width=640, height=512, pixel_pitch_um=17.0, focal_length_mm=25.0)


def _field_grid(half_angle_deg: float, n: int = 9) -> np.ndarray:
    """Unit directions on an n x n grid of field angles up to +/- half_angle_deg."""
    t = np.tan(np.radians(np.linspace(-half_angle_deg, half_angle_deg, n)))
    xx, yy = np.meshgrid(t, t)
    d = np.column_stack([xx.ravel(), yy.ravel(), np.ones(xx.size)])
    return d / np.linalg.norm(d, axis=1, keepdims=True)


@pytest.mark.parametrize("dist", [
    BrownConrady(),
    BrownConrady(k1=-0.08),
    BrownConrady(k1=-0.2, k2=0.05, p1=1e-3, p2=-2e-3, k3=-0.01),
    BrownConrady(k1=0.15, k2=-0.3, p1=-4e-3, p2=3e-3, k3=0.2),
])
def test_projection_matches_opencv_projectPoints(dist: BrownConrady) -> None:
    # Reference: cv2.projectPoints (OpenCV calib3d), same K and (k1, k2, p1, p2, k3),
    # rvec = tvec = 0, object points = unit directions. Agreement required: 1e-6 px.
    geom = DEMO.replace(cx=322.7, cy=251.2, aspect=1.003, distortion=dist)
    dirs = _field_grid(12.0)
    ours = project(geom, dirs)
    ref, _ = cv2.projectPoints(dirs.reshape(-1, 1, 3), np.zeros(3), np.zeros(3),
                               geom.camera_matrix(), dist.as_opencv())
    np.testing.assert_allclose(ours, ref.reshape(-1, 2), atol=1e-6, rtol=0)


def test_roll_matches_opencv_rotation_about_optical_axis() -> None:
    # Roll of the detector by +r about +z equals OpenCV's rvec = (0, 0, -r) applied to the scene
    # (Rodrigues rotation, OpenCV calib3d); distortion acts after roll in both.
    roll = 1.7
    dist = BrownConrady(k1=-0.1, p1=1e-3)
    geom = DEMO.replace(roll_deg=roll, distortion=dist)
    dirs = _field_grid(10.0, 7)
    ref, _ = cv2.projectPoints(dirs.reshape(-1, 1, 3), np.array([0.0, 0.0, -math.radians(roll)]),
                               np.zeros(3), geom.camera_matrix(), dist.as_opencv())
    np.testing.assert_allclose(project(geom, dirs), ref.reshape(-1, 2), atol=1e-6, rtol=0)


def test_skew_follows_affine_definition() -> None:
    # u = fx (x'' + tan(skew) y'') + cx (OpenCV's K with K[0,1] = fx tan(skew), calib3d docs):
    # the skew shift must equal fx tan(skew) y'' exactly.
    geom = DEMO.replace(skew_deg=0.05)
    dirs = _field_grid(8.0, 5)
    shift = project(geom, dirs) - project(DEMO, dirs)
    yn = dirs[:, 1] / dirs[:, 2]
    np.testing.assert_allclose(shift[:, 0], geom.fx * math.tan(math.radians(0.05)) * yn,
                               atol=1e-9)
    np.testing.assert_allclose(shift[:, 1], 0.0, atol=1e-9)


@pytest.mark.parametrize("collimator_f", [500.0, 1000.0, 2000.0])
def test_collimator_relay_images_x_at_f_x_over_F(collimator_f: float) -> None:
    # Paraxial relay (W. J. Smith, Modern Optical Engineering): a distortion-free rectilinear
    # camera images a plate point x mm at f*x/F on the detector at every field angle, inverted.
    pts = np.array([[x, y] for x in (-40.0, -7.5, 0.0, 12.0, 40.0) for y in (-30.0, 0.0, 25.0)])
    px = project_target(DEMO, pts, collimator_f)
    cx, cy = DEMO.principal_point
    expected = np.column_stack([cx - DEMO.focal_length_mm * pts[:, 0] / collimator_f
                                * 1000.0 / DEMO.pixel_pitch_um,
                                cy - DEMO.focal_length_mm * pts[:, 1] / collimator_f
                                * 1000.0 / DEMO.pixel_pitch_um])
    np.testing.assert_allclose(px, expected, atol=1e-9)
    # Field angle atan(r / F) (same source).
    ang = field_angles(collimator_directions(pts, collimator_f))
    np.testing.assert_allclose(ang, np.arctan(np.hypot(pts[:, 0], pts[:, 1]) / collimator_f),
                               atol=1e-15)


@pytest.mark.parametrize("deg, expected_percent", [(10, -1.0175), (20, -4.0949), (30, -9.3100)])
def test_f_theta_against_rectilinear(deg: float, expected_percent: float) -> None:
    # Equidistant f*t vs rectilinear f*tan(t): t/tan(t) - 1 (panotools general lens model
    # formulas; values in CHECKS.md computed from them, 4 decimals).
    rect = DEMO.replace(width=4000, height=4000)
    ftheta = rect.replace(projection="equidistant")
    t = math.radians(deg)
    d = np.array([[math.sin(t), 0.0, math.cos(t)]])
    cx = rect.principal_point[0]
    h_rect = project(rect, d)[0, 0] - cx
    h_ft = project(ftheta, d)[0, 0] - cx
    assert 100.0 * (h_ft / h_rect - 1.0) == pytest.approx(expected_percent, abs=5e-5)


def test_gimbal_matches_intrinsic_euler_rotation() -> None:
    # Reference: scipy Rotation.from_euler("YX", [az, el]) (intrinsic y then x), the standard
    # composition of an azimuth-over-elevation gimbal; orthonormal with det +1.
    for az, el in [(0, 0), (30, 30), (-12.5, 7.0), (170, -60)]:
        r = gimbal_rotation(az, el)
        ref = Rotation.from_euler("YX", [az, el], degrees=True).as_matrix()
        np.testing.assert_allclose(r, ref, atol=1e-12)
        np.testing.assert_allclose(r @ r.T, np.eye(3), atol=1e-12)
        assert np.linalg.det(r) == pytest.approx(1.0, abs=1e-12)


def test_gimbal_composition_is_not_added_angles() -> None:
    # Line of sight for az-over-el (spherical coordinates): (cos el sin az, -sin el, cos el cos az).
    # At az = el = 30 deg, the naive "added field angles" direction (tan az, -tan el, 1) differs
    # from it by a closed-form angle.
    az, el = math.radians(30), math.radians(30)
    los = gimbal_rotation(30, 30) @ np.array([0.0, 0.0, 1.0])
    expected = np.array([math.cos(el) * math.sin(az), -math.sin(el), math.cos(el) * math.cos(az)])
    np.testing.assert_allclose(los, expected, atol=1e-12)
    naive = np.array([math.tan(az), -math.tan(el), 1.0])
    naive /= np.linalg.norm(naive)
    gap = math.degrees(math.acos(float(los @ naive)))
    # Horizontal angle of the true line of sight is az (30 deg); the naive one also has 30 deg
    # horizontally but its elevation is atan(tan30 * cos30) = 26.565 deg, not 30 deg.
    naive_el = math.degrees(math.asin(-naive[1]))
    assert naive_el == pytest.approx(math.degrees(math.atan(math.tan(el) * math.cos(az))), abs=1e-9)
    assert gap > 2.0
    # Pointing the gimbal at a collimated point puts it on the principal point.
    target = los[None, :]
    np.testing.assert_allclose(project(DEMO, to_camera_frame(target, 30, 30)),
                               [DEMO.principal_point], atol=1e-9)


def test_positive_azimuth_moves_the_image_left() -> None:
    # Sign convention (module docstring): +az turns the line of sight to +x, so the on-axis
    # collimator image moves toward smaller x by f*tan(az) px for a rectilinear camera.
    px = project_target(DEMO, np.zeros((1, 2)), 1000.0, az_deg=1.0)
    assert px[0, 0] - DEMO.principal_point[0] == pytest.approx(-DEMO.fx * math.tan(math.radians(1)),
                                                               abs=1e-9)
    px = project_target(DEMO, np.zeros((1, 2)), 1000.0, el_deg=1.0)
    assert px[0, 1] - DEMO.principal_point[1] == pytest.approx(DEMO.fx * math.tan(math.radians(1)),
                                                               abs=1e-9)


def test_undistort_inverts_apply() -> None:
    # Fixed-point inverse as cv2.undistortPoints; checked against apply within 1e-9, and
    # against cv2.undistortPoints (identity K) as an outside reference.
    d = BrownConrady(k1=-0.08, k2=0.01, p1=5e-4, p2=-3e-4, k3=-0.002)
    rng = np.random.default_rng(1)
    xy = rng.uniform(-0.25, 0.25, size=(200, 2))
    back = undistort_normalized(apply_brown_conrady(xy, d), d, iterations=40)
    np.testing.assert_allclose(back, xy, atol=1e-9)
    ref = cv2.undistortPoints(apply_brown_conrady(xy, d).reshape(-1, 1, 2), np.eye(3),
                              d.as_opencv(), None, None, None,
                              (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 100, 1e-14))
    np.testing.assert_allclose(ref.reshape(-1, 2), xy, atol=1e-7)


def test_local_defect_is_a_gaussian_bump() -> None:
    # Definition: displacement amplitude * exp(-d^2 / (2 sigma^2)) along direction_deg.
    defect = LocalDefect(x_px=400.0, y_px=300.0, amplitude_px=0.4, sigma_px=30.0,
                         direction_deg=90.0)
    geom = DEMO.replace(defects=(defect,))
    pts = np.array([[0.0, 0.0], [5.0, -3.0], [-20.0, 10.0]])
    base = project_target(DEMO, pts, 1000.0)
    shifted = project_target(geom, pts, 1000.0)
    d2 = ((base - [400.0, 300.0]) ** 2).sum(axis=1)
    expected = 0.4 * np.exp(-d2 / (2 * 30.0 ** 2))
    np.testing.assert_allclose(shifted[:, 1] - base[:, 1], expected, atol=1e-12)
    np.testing.assert_allclose(shifted[:, 0] - base[:, 0], 0.0, atol=1e-12)


def test_camera_matrix_and_ifov() -> None:
    # IFOV = pitch / focal length (definition): 17 um / 25 mm = 0.68 mrad; fx = f / pitch.
    assert DEMO.ifov_mrad == pytest.approx(0.68, rel=1e-12)
    k = DEMO.camera_matrix()
    assert k[0, 0] == pytest.approx(25.0e3 / 17.0, rel=1e-12)
    assert DEMO.principal_point == (319.5, 255.5)
    with pytest.raises(ValueError, match="projection"):
        DEMO.replace(projection="fisheye-ish")
