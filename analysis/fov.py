"""Field of view (horizontal, vertical, diagonal) and IFOV from a camera model, the IFOV from a
scan's slope, and the FOV spec keys and verdicts. Scan-mode FOV (edges found on the stage) is in
`analysis.fov_scan`.

Standard lens formulas (W. J. Smith, *Modern Optical Engineering*, field of view of an imaging
system; panotools "General lens model" for the wide-angle projections): a rectilinear camera of
focal length f with N pixels of pitch p across sees ``2 atan(N p / 2 f)``; an equidistant
(f-theta) one ``N p / f`` rad; on axis one pixel subtends the IFOV ``p / f``.

* **From a camera model** (`fov_from_model`): the sum of the field angles (from the optical
  axis) of the lines of sight through the outer *edges* of the outer pixels (x = -0.5 and
  W - 0.5 on the principal point's row for the horizontal FOV, likewise vertically, opposite
  corners for the diagonal), through the exact inverse of the model
  (`analysis.alignment.pixel_to_direction`). Works for a fitted model with distortion; the
  uncertainty comes from the focal length's.
* **IFOV at the centre** (`ifov_from_slope`): the slope of the centroid's position against the
  stage angle around the boresight, fitted with a cubic term so the projection's curvature does
  not bias it.

Axis order: pixel positions (x, y) = (column, row); poses (az, el) deg.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from analysis.alignment import pixel_to_direction
from analysis.geometry import CameraGeometry
from analysis.verdicts import SpecKey, Verdict

__all__ = ["FOV_SPEC_KEYS", "FieldOfView", "fov_from_model", "ifov_from_slope", "fov_verdicts"]

_AXES = {"h": "horizontal", "v": "vertical", "d": "diagonal"}


def _fov_keys() -> dict[str, SpecKey]:
    keys = {}
    for a, name in _AXES.items():
        for sense in ("min", "max"):
            key = f"{sense}_fov_{a}_deg"
            keys[key] = SpecKey(key, f"{name} FOV", "deg", sense,
                                f"{name} field of view: angle between the lines of sight through "
                                "the outer edges of the active area")
    return keys


FOV_SPEC_KEYS: Mapping[str, SpecKey] = _fov_keys()


@dataclass(frozen=True)
class FieldOfView:
    """Full field of view per axis (deg) with 1-sigma, the IFOV (mrad) and how it was found."""

    h_deg: float
    v_deg: float
    d_deg: float
    sigma_h_deg: float
    sigma_v_deg: float
    sigma_d_deg: float
    ifov_mrad: float = float("nan")
    sigma_ifov_mrad: float = float("nan")
    method: str = "model"
    notes: tuple[str, ...] = ()

    def value(self, axis: str) -> tuple[float, float]:
        """(value, sigma) deg for axis 'h', 'v' or 'd'."""
        return getattr(self, f"{axis}_deg"), getattr(self, f"sigma_{axis}_deg")

    def to_dict(self) -> dict[str, Any]:
        def fin(x: float) -> float | None:
            return float(x) if math.isfinite(x) else None
        return {"method": self.method, "h_deg": fin(self.h_deg), "v_deg": fin(self.v_deg),
                "d_deg": fin(self.d_deg), "sigma_h_deg": fin(self.sigma_h_deg),
                "sigma_v_deg": fin(self.sigma_v_deg), "sigma_d_deg": fin(self.sigma_d_deg),
                "ifov_mrad": fin(self.ifov_mrad), "sigma_ifov_mrad": fin(self.sigma_ifov_mrad),
                "notes": list(self.notes)}


def _angle_deg(a: np.ndarray, b: np.ndarray) -> float:
    return math.degrees(math.atan2(float(np.linalg.norm(np.cross(a, b))), float(a @ b)))


def _model_fov(geom: CameraGeometry) -> np.ndarray:
    cx, cy = geom.principal_point
    w, h = geom.width - 0.5, geom.height - 0.5
    pts = np.array([[-0.5, cy], [w, cy], [cx, -0.5], [cx, h], [-0.5, -0.5], [w, h]])
    d = pixel_to_direction(geom, pts)
    # Each edge's field angle from the optical axis, summed: a fish-eye's field may pass 180 deg,
    # where the angle between the two edge directions would fold back.
    theta = np.degrees(np.arctan2(np.hypot(d[:, 0], d[:, 1]), d[:, 2]))
    return np.array([theta[0] + theta[1], theta[2] + theta[3], theta[4] + theta[5]])


def fov_from_model(geom: CameraGeometry, *, focal_sigma_mm: float = 0.0) -> FieldOfView:
    """FOV of a camera model through the outer pixel edges (see module); IFOV = p / f.

    >>> g = CameraGeometry(640, 512, 17.0, 25.0)
    >>> fov = fov_from_model(g)
    >>> round(fov.h_deg, 4) == round(math.degrees(2 * math.atan(640 * 0.017 / 50)), 4)
    True
    >>> round(fov.ifov_mrad, 3)
    0.68
    """
    base = _model_fov(geom)
    sig = np.zeros(3)
    s_ifov = 0.0
    if focal_sigma_mm > 0:
        h = 1e-3 * geom.focal_length_mm
        grad = (_model_fov(geom.replace(focal_length_mm=geom.focal_length_mm + h)) - base) / h
        sig = np.abs(grad) * focal_sigma_mm
        s_ifov = geom.ifov_mrad * focal_sigma_mm / geom.focal_length_mm
    return FieldOfView(float(base[0]), float(base[1]), float(base[2]), float(sig[0]),
                       float(sig[1]), float(sig[2]), geom.ifov_mrad, s_ifov, "model")


def ifov_from_slope(angles_deg: Sequence[float], positions_px: Sequence[float],
                    sigma_px: Sequence[float] | float | None = None) -> tuple[float, float]:
    """IFOV (mrad) at the centre and its 1-sigma from spot positions against stage angles.

    Weighted least squares of ``x = a + b t + c t^2 + d t^3`` (t in rad about the mean angle;
    quadratic and cubic terms only when there are enough points), IFOV = 1 / |b|. The sigma comes
    from the covariance of b, scaled by the reduced chi-square when it exceeds 1 (common practice).

    >>> t = np.radians(np.linspace(-1, 1, 9))
    >>> ifov, s = ifov_from_slope(np.degrees(t), 100 - np.tan(t) * 25.0 / 0.017)
    >>> round(ifov, 6)
    0.68
    """
    t = np.radians(np.asarray(angles_deg, dtype=float))
    x = np.asarray(positions_px, dtype=float)
    n = len(t)
    if n < 3:
        raise ValueError("IFOV from the slope needs at least three stage angles")
    t = t - t.mean()
    degree = 3 if n >= 5 else 1
    a = np.vander(t, degree + 1, increasing=True)
    w = np.ones(n) if sigma_px is None else 1.0 / np.broadcast_to(np.asarray(sigma_px, float), (n,))
    coef, *_ = np.linalg.lstsq(a * w[:, None], x * w, rcond=None)
    resid = (x - a @ coef) * w
    dof = n - (degree + 1)
    cov = np.linalg.inv((a * w[:, None]).T @ (a * w[:, None]))
    chi2 = float(resid @ resid) / dof if dof > 0 else 1.0
    if sigma_px is None or chi2 > 1.0:
        cov = cov * chi2
    slope = abs(float(coef[1]))
    ifov = 1000.0 / slope
    return ifov, ifov * math.sqrt(float(cov[1, 1])) / slope



def fov_verdicts(limits: Mapping[str, float], fov: FieldOfView,
                 conditions: Mapping[str, Any] | None = None) -> tuple[Verdict, ...]:
    """Verdicts for the FOV spec keys present in `limits` (others ignored)."""
    out = []
    for key, spec in FOV_SPEC_KEYS.items():
        if key in limits:
            axis = key.split("_")[2]
            value, sigma = fov.value(axis)
            out.append(spec.judge(value, sigma, float(limits[key]),
                                  {**(conditions or {}), "method": fov.method}))
    return tuple(out)
