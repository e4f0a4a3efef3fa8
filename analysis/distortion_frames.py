"""From frames to a distortion result: the two measurement modes end to end.

Pure functions shared by the station (a run's captures) and by the standalone command (a TIFF from
elsewhere): detect or locate the spots, compute the expected directions from the collimator and
gimbal geometry, and hand both to the fit in analysis.distortion.

- Grid mode: one frame of a pinhole grid; every pinhole's collimated beam (collimator at focal
  length F: field angle atan(x/F), paraxial optics) turned into the camera frame by the stage pose.
- Scan mode: one pinhole on the axis, one frame per stage pose; the expected direction of each
  pose is the beam turned by the azimuth-over-elevation gimbal rotation. One centroid per pose.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from analysis.centroid import centroid_at, detect_spots
from analysis.distortion import DistortionResult, analyze_grid, analyze_scan
from analysis.geometry import CameraGeometry, collimator_directions, project, to_camera_frame


def distortion_from_grid_frame(image: np.ndarray, points_mm: np.ndarray,
                               collimator_focal_mm: float, nominal: CameraGeometry, *,
                               labels: Sequence[str] | None = None, az_deg: float = 0.0,
                               el_deg: float = 0.0, spec: Mapping[str, float] | None = None,
                               saturation: float | None = None,
                               threshold_sigma: float = 5.0) -> DistortionResult:
    """Distortion from one (averaged) frame of a pinhole grid; points_mm are (x, y) on the target."""
    spots = detect_spots(np.asarray(image, dtype=float), saturation=saturation, method="gauss",
                         threshold_sigma=threshold_sigma)
    directions = to_camera_frame(collimator_directions(np.asarray(points_mm, float),
                                                       collimator_focal_mm), az_deg, el_deg)
    return analyze_grid(spots, directions, nominal, labels=labels, spec=spec)


def distortion_from_scan_frames(images: Sequence[np.ndarray], poses_deg: np.ndarray,
                                collimator_focal_mm: float, nominal: CameraGeometry, *,
                                pinhole_mm: tuple[float, float] = (0.0, 0.0),
                                labels: Sequence[str] | None = None,
                                spec: Mapping[str, float] | None = None,
                                search_px: int = 25,
                                saturation: float | None = None) -> DistortionResult:
    """Distortion from one pinhole seen at each stage pose (az, el in degrees, one frame each)."""
    poses = np.asarray(poses_deg, dtype=float).reshape(-1, 2)
    if len(images) != len(poses):
        raise ValueError(f"{len(images)} frames for {len(poses)} stage poses; they must pair up")
    beam = collimator_directions(np.array([pinhole_mm], dtype=float), collimator_focal_mm)
    measured = []
    for image, (az, el) in zip(images, poses):
        x0, y0 = project(nominal, to_camera_frame(beam, az, el))[0]
        try:
            spot = centroid_at(np.asarray(image, dtype=float), float(x0), float(y0),
                               search_px=search_px, saturation=saturation)
        except ValueError:
            spot = None  # the expected position lies outside the frame
        measured.append(spot)
    return analyze_scan(measured, poses, nominal, pinhole_mm=pinhole_mm,
                        collimator_focal_mm=collimator_focal_mm, labels=labels, spec=spec)
