"""Undistortion maps against OpenCV (initUndistortRectifyMap, remap, undistortPoints)."""

from __future__ import annotations

import numpy as np
import pytest

from analysis.centroid import detect_spots
from analysis.geometry import BrownConrady, CameraGeometry
from analysis.undistort import undistort_image, undistortion_maps

cv2 = pytest.importorskip("cv2")

GEOM = CameraGeometry(640, 512, 17.0, 25.0, cx=322.4, cy=254.1,
                      distortion=BrownConrady(k1=-0.3, k2=0.12, p1=2e-4, p2=-3e-4))


def test_maps_equal_opencv_init_undistort_rectify_map():
    # OpenCV calib3d: initUndistortRectifyMap(K, D, None, K, size, CV_32FC1) is the same lookup.
    K = GEOM.camera_matrix()
    mx_cv, my_cv = cv2.initUndistortRectifyMap(K, GEOM.distortion.as_opencv(), None, K, (640, 512), cv2.CV_32FC1)
    mx, my = undistortion_maps(GEOM)
    assert mx.dtype == np.float32 and mx.shape == (512, 640)
    # float32 rounding of coordinates up to ~700: a few 1e-4 px.
    assert np.max(np.abs(mx - mx_cv)) < 2e-3
    assert np.max(np.abs(my - my_cv)) < 2e-3


def _spots(xy, shape=(512, 640), s=1.2, flux=8000.0, bg=100.0):
    from scipy.special import ndtr

    h, w = shape
    img = np.full(shape, bg)
    c, r = np.arange(w), np.arange(h)
    for x, y in xy:
        ex = ndtr((c + 0.5 - x) / s) - ndtr((c - 0.5 - x) / s)
        ey = ndtr((r + 0.5 - y) / s) - ndtr((r - 0.5 - y) / s)
        img += flux * np.outer(ey, ex)
    return img


def test_image_distorted_by_cv2_remap_comes_back():
    """Ideal grid image -> distorted by cv2.remap (source position of every distorted pixel from
    cv2.undistortPoints) -> undistort_image -> spots back at the ideal positions within 0.05 px.

    Lanczos-4 in cv2.remap: its bicubic mode (fixed-point weights) was measured here to move
    1.2-px spots by up to 0.06 px on its own, Lanczos-4 by about 0.01 px."""
    K = GEOM.camera_matrix()
    D = GEOM.distortion.as_opencv()
    X, Y = np.meshgrid(np.linspace(60, 580, 9), np.linspace(60, 450, 7))
    ideal_xy = np.column_stack([X.ravel(), Y.ravel()]) + 0.37
    ideal_img = _spots(ideal_xy).astype(np.float32)
    v, u = np.mgrid[0:512, 0:640].astype(np.float64)
    src = cv2.undistortPoints(np.column_stack([u.ravel(), v.ravel()]).reshape(-1, 1, 2), K, D, R=None, P=K,
                              criteria=(cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 50, 1e-10)).reshape(512, 640, 2)
    distorted = cv2.remap(ideal_img, src[..., 0].astype(np.float32), src[..., 1].astype(np.float32),
                          cv2.INTER_LANCZOS4, borderMode=cv2.BORDER_CONSTANT, borderValue=100.0)
    # Sensor noise (sigma 1 DN, centroid noise ~0.003 px) so the background has a real sigma.
    distorted = distorted + np.random.default_rng(1).normal(0, 1.0, distorted.shape).astype(np.float32)
    back = undistort_image(distorted, GEOM)
    found = np.array([[s.x, s.y] for s in detect_spots(back, window_px=9)])
    d = np.hypot(found[:, None, 0] - ideal_xy[None, :, 0], found[:, None, 1] - ideal_xy[None, :, 1])
    # Every ideal spot found again within 0.05 px (a stray ringing blob at the frame border,
    # far from any spot, does not matter).
    assert d.min(axis=0).max() < 0.05
    # And the distorted image really was distorted (by more than a pixel at the corners).
    found_d = np.array([[s.x, s.y] for s in detect_spots(distorted.astype(float), window_px=9)])
    dd = np.hypot(found_d[:, None, 0] - ideal_xy[None, :, 0], found_d[:, None, 1] - ideal_xy[None, :, 1])
    assert dd.min(axis=0).max() > 1.0


def test_wrong_frame_size_is_a_clear_error():
    with pytest.raises(ValueError, match="camera model is 640x512"):
        undistort_image(np.zeros((10, 10)), GEOM)
