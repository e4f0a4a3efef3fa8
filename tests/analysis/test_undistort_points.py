"""Inverse Brown-Conrady of the distortion analysis against OpenCV's forward model (cv2.projectPoints,
the reference implementation of the calib3d convention)."""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from analysis.distortion import _undistort_xy


def _opencv_distort(x: np.ndarray, y: np.ndarray, k1, k2, k3, p1, p2) -> np.ndarray:
    obj = np.column_stack([x, y, np.ones_like(x)]).astype(np.float64)
    out, _ = cv2.projectPoints(obj, np.zeros(3), np.zeros(3), np.eye(3), np.array([k1, k2, p1, p2, k3], float))
    return out.reshape(-1, 2)


@pytest.mark.parametrize("n", [8, 200])  # 8: the point-by-point path; 200: the array path
@pytest.mark.parametrize("seed", range(4))
def test_undistorted_points_distort_back_through_opencv(n, seed):
    rng = np.random.default_rng(seed)
    k1, k2, k3, p1, p2 = rng.normal(0, [0.15, 0.03, 0.005, 5e-4, 5e-4])
    target = rng.uniform(-0.35, 0.35, (n, 2))  # distorted normalized points
    x, y = _undistort_xy(target[:, 0], target[:, 1], k1, k2, k3, p1, p2)
    # Distorting the answer with OpenCV's model gives back the input (our tolerance: 1e-13 of
    # the Newton iteration, a few ulp from the two evaluations of the polynomial).
    np.testing.assert_allclose(_opencv_distort(x, y, k1, k2, k3, p1, p2), target, rtol=0, atol=1e-12)


def test_perturbed_models_from_a_start_agree_with_a_cold_start():
    rng = np.random.default_rng(7)
    t = rng.uniform(-0.3, 0.3, (8, 2))
    base = np.array([-0.2, 0.03, 0.0, 2e-4, -1e-4])
    models = base + rng.normal(0, 1e-6, (11, 5))
    cols = [models[:, i:i + 1] for i in range(5)]
    x0, y0 = _undistort_xy(t[:, 0], t[:, 1], *base)
    warm = _undistort_xy(np.repeat(t[None, :, 0], 11, 0), np.repeat(t[None, :, 1], 11, 0), *cols,
                         start=(x0[None, :], y0[None, :]))
    for i in range(11):
        dist = _opencv_distort(warm[0][i], warm[1][i], *models[i])
        np.testing.assert_allclose(dist, t, rtol=0, atol=1e-12)
