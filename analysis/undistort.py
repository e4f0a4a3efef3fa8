"""Undistortion maps and image correction from a fitted camera model.

Axis order: maps are (rows, cols) arrays like the image; map_x holds the source column and
map_y the source row for each output pixel, as cv2.remap expects. Pixel centres are integers.

Method: for each output pixel of an ideal (distortion-free) camera with the same camera matrix,
remove the camera matrix, apply the Brown-Conrady model forward (OpenCV calib3d convention,
the same as cv2.initUndistortRectifyMap without rectification) and put the camera matrix back;
the image is then resampled there (scipy.ndimage.map_coordinates, cubic spline by default).
"""

from __future__ import annotations

import math

import numpy as np

from analysis.geometry import CameraGeometry, apply_brown_conrady

__all__ = ["undistortion_maps", "undistort_image"]


def undistortion_maps(geom: CameraGeometry) -> tuple[np.ndarray, np.ndarray]:
    """(map_x, map_y) float32 of shape (height, width): where each corrected pixel comes from."""
    h, w = geom.height, geom.width
    cx, cy = geom.principal_point
    t = math.tan(math.radians(geom.skew_deg))
    v, u = np.mgrid[0:h, 0:w].astype(np.float64)
    yn = (v - cy) / geom.fy
    xn = (u - cx) / geom.fx - t * yn
    d = apply_brown_conrady(np.column_stack([xn.ravel(), yn.ravel()]), geom.distortion)
    map_x = geom.fx * (d[:, 0] + t * d[:, 1]) + cx
    map_y = geom.fy * d[:, 1] + cy
    return map_x.reshape(h, w).astype(np.float32), map_y.reshape(h, w).astype(np.float32)


def undistort_image(image: np.ndarray, geom: CameraGeometry, *, order: int = 3,
                    fill: float | None = None) -> np.ndarray:
    """Corrected copy of a frame (rows, cols); pixels whose source lies outside get fill
    (default: the frame's median). Spline order 3 keeps spot centroids to a few hundredths of
    a pixel; order 1 is faster."""
    img = np.asarray(image)
    if img.shape != (geom.height, geom.width):
        raise ValueError(
            f"frame is {img.shape[1]}x{img.shape[0]} (cols x rows) but the camera model is "
            f"{geom.width}x{geom.height}; use the model fitted for this camera"
        )
    # Imported here: only image resampling needs it, not the maps written with every result.
    from scipy import ndimage

    map_x, map_y = undistortion_maps(geom)
    cval = float(np.median(img)) if fill is None else float(fill)
    out = ndimage.map_coordinates(img.astype(np.float64), [map_y, map_x], order=order, mode="constant", cval=cval)
    return out.astype(img.dtype) if np.issubdtype(img.dtype, np.floating) else out
