"""Field of view (horizontal, vertical, diagonal) and IFOV, from a model or directly by scanning.

Standard lens formulas (W. J. Smith, *Modern Optical Engineering*, field of view of an imaging
system; panotools "General lens model" for the wide-angle projections): a rectilinear camera of
focal length f with N pixels of pitch p across sees ``2 atan(N p / 2 f)``; an equidistant
(f-theta) one ``N p / f`` rad; on axis one pixel subtends the IFOV ``p / f``.

Three ways, each with its uncertainty:

* **From a camera model** (`fov_from_model`): the sum of the field angles (from the optical
  axis) of the lines of sight through the outer *edges* of the outer pixels (x = -0.5 and
  W - 0.5 on the principal point's row for the horizontal FOV, likewise vertically, opposite
  corners for the diagonal), through the exact inverse of the model
  (`analysis.alignment.pixel_to_direction`). Works for a fitted model with distortion; the
  uncertainty comes from the focal length's.
* **Directly, in scan mode** (`find_edge`, `fov_from_edge_poses`): the on-axis pinhole is stepped
  outwards with the stage until its image leaves the active area; the edge is where half of the
  spot's flux is still on the detector (for a symmetric spot, its centre is then on the outer
  pixel edge). The edge pose is bracketed by bisection on the stage and the last bracket is
  interpolated linearly in the flux fraction. The FOV is the angle between the lines of sight of
  the two edge poses of an axis (exact for the az-over-el gimbal); the diagonal is derived from
  H and V through the projection law.
* **IFOV at the centre** (`ifov_from_slope`): the slope of the centroid's position against the
  stage angle around the boresight, fitted with a cubic term so the projection's curvature does
  not bias it.

Axis order: pixel positions (x, y) = (column, row); poses (az, el) deg.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import ndimage

from analysis.alignment import inverse_radial, axis_direction_at, pixel_to_direction
from analysis.centroid import Background, estimate_background
from analysis.geometry import CameraGeometry, _radial_map
from analysis.verdicts import SpecKey, Verdict

__all__ = ["FOV_SPEC_KEYS", "FieldOfView", "fov_from_model", "ifov_from_slope", "spot_flux",
           "spot_flux_near", "EdgeProbe", "EdgeSearch", "find_edge", "fov_from_edge_poses",
           "fov_verdicts", "ScanFov", "scan_fov",
           "line_of_sight_angle_deg"]

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


def _without_bad_pixels(img: np.ndarray, bg: Background, saturation: float | None) -> np.ndarray:
    """Dead pixels (more than 10 sigma below the background: nothing real is darker) and hot ones
    (at the saturation level, which a measured spot never reaches) set to the background, so
    they neither add to a flux nor pass for the spot (common practice: bad-pixel masking)."""
    level = np.broadcast_to(np.asarray(bg.level, dtype=float), img.shape)
    bad = img < level - 10.0 * bg.noise
    if saturation is not None:
        bad |= img >= saturation
    if not bad.any():
        return img
    out = img.copy()
    out[bad] = level[bad]
    return out


def spot_flux(image: np.ndarray, x: float, y: float, *, half_px: int = 4,
              background: Background | None = None,
              saturation: float | None = None) -> tuple[float, float]:
    """Background-subtracted signal (DN) in the box of half-size `half_px` around (x, y), clipped
    to the frame ([row, col] image), and its 1-sigma from the background noise. Dead pixels, and
    hot ones at `saturation`, count as background."""
    img = np.asarray(image, dtype=float)
    bg = background or estimate_background(img)
    img = _without_bad_pixels(img, bg, saturation)
    h, w = img.shape
    xi, yi = int(round(x)), int(round(y))
    x0, x1 = max(0, xi - half_px), min(w, xi + half_px + 1)
    y0, y1 = max(0, yi - half_px), min(h, yi + half_px + 1)
    if x0 >= x1 or y0 >= y1:
        return 0.0, bg.noise
    box = img[y0:y1, x0:x1] - bg.level if np.isscalar(bg.level) else (
        img[y0:y1, x0:x1] - np.asarray(bg.level)[y0:y1, x0:x1])
    return float(box.sum()), bg.noise * math.sqrt(box.size)


def spot_flux_near(image: np.ndarray, x: float, y: float, *, search_px: int = 10,
                   half_px: int = 4, background: Background | None = None,
                   saturation: float | None = None) -> tuple[float, float]:
    """`spot_flux` around the brightest (3x3-smoothed) pixel within `search_px` of (x, y), the
    search box clipped to the frame: the spot need not be where a model predicts it, and a spot
    half off the frame is summed over the part that is still on it. Dead pixels, and hot ones at
    `saturation`, are masked first so they are never taken for the spot."""
    img = np.asarray(image, dtype=float)
    bg = background or estimate_background(img)
    img = _without_bad_pixels(img, bg, saturation)
    h, w = img.shape
    xi = int(round(min(max(x, 0.0), w - 1.0)))
    yi = int(round(min(max(y, 0.0), h - 1.0)))
    x0, x1 = max(0, xi - search_px), min(w, xi + search_px + 1)
    y0, y1 = max(0, yi - search_px), min(h, yi + search_px + 1)
    box = ndimage.uniform_filter(img[y0:y1, x0:x1], 3, mode="nearest")
    r, c = np.unravel_index(int(np.argmax(box)), box.shape)
    return spot_flux(img, x0 + c, y0 + r, half_px=half_px, background=bg)  # already masked


@dataclass(frozen=True)
class EdgeProbe:
    """One look during an edge search: stage angle (deg) and the flux fraction seen there."""

    angle_deg: float
    fraction: float
    sigma: float


@dataclass(frozen=True)
class EdgeSearch:
    """Where the spot leaves the active area along one stage axis: the angle (deg) at which half
    of its flux remains, with 1-sigma, and every probe taken."""

    angle_deg: float
    sigma_deg: float
    probes: tuple[EdgeProbe, ...] = field(default_factory=tuple)
    slope_per_deg: float = float("nan")

    def to_dict(self) -> dict[str, Any]:
        return {"angle_deg": self.angle_deg, "sigma_deg": self.sigma_deg,
                "slope_per_deg": self.slope_per_deg,
                "probes": [[p.angle_deg, p.fraction, p.sigma] for p in self.probes]}


def find_edge(fraction_at: Callable[[float], tuple[float, float]], inside_deg: float,
              outside_deg: float, *, tolerance_deg: float, max_probes: int = 30,
              stage_sigma_deg: float = 0.0) -> EdgeSearch:
    """Bisection on the stage for the angle where the flux fraction crosses one half.

    `fraction_at(angle)` moves the stage, takes a frame and returns (fraction, sigma) of the
    spot's reference flux still on the detector. `inside_deg` must see the spot (fraction > 1/2),
    `outside_deg` must not. Bisection until the bracket is narrower than `tolerance_deg`, then
    linear interpolation of the fraction across the bracket; sigma combines the fraction's noise
    through that slope, the interpolation's worst case (a quarter of the bracket, as a uniform
    error: /sqrt(3)) and the stage's own sigma (GUM, JCGM 100:2008).
    """
    probes: list[EdgeProbe] = []

    def probe(a: float) -> EdgeProbe:
        f, s = fraction_at(a)
        p = EdgeProbe(float(a), float(f), float(s))
        probes.append(p)
        return p

    lo, hi = probe(inside_deg), probe(outside_deg)
    if not lo.fraction > 0.5:
        raise ValueError(f"the spot is not on the detector at the inside angle {inside_deg:g} deg "
                         f"(flux fraction {lo.fraction:.2f}); align first")
    if not hi.fraction < 0.5:
        raise ValueError(f"the spot is still on the detector at {outside_deg:g} deg (flux "
                         f"fraction {hi.fraction:.2f}); widen the search range")
    while abs(hi.angle_deg - lo.angle_deg) > tolerance_deg:
        if len(probes) >= max_probes:
            raise ValueError(f"edge search used {max_probes} probes without narrowing to "
                             f"{tolerance_deg:g} deg; is the flux stable?")
        mid = probe(0.5 * (lo.angle_deg + hi.angle_deg))
        if mid.fraction > 0.5:
            lo = mid
        else:
            hi = mid
    slope = (hi.fraction - lo.fraction) / (hi.angle_deg - lo.angle_deg)
    angle = lo.angle_deg + (0.5 - lo.fraction) / slope
    frac_sigma = math.hypot(lo.sigma, hi.sigma) / math.sqrt(2.0)
    width = abs(hi.angle_deg - lo.angle_deg)
    sigma = math.sqrt((frac_sigma / abs(slope)) ** 2 + (width / 4.0) ** 2 / 3.0
                      + stage_sigma_deg ** 2)
    return EdgeSearch(float(angle), float(sigma), tuple(probes), float(slope))


def line_of_sight_angle_deg(pose_a: Sequence[float], pose_b: Sequence[float]) -> float:
    """Angle (deg) between the collimator axis as seen by the UUT at two stage poses (exact for
    the az-over-el gimbal: the angle between ``R_a^T e_z`` and ``R_b^T e_z``)."""
    return _angle_deg(axis_direction_at(float(pose_a[0]), float(pose_a[1])),
                      axis_direction_at(float(pose_b[0]), float(pose_b[1])))


def _radial(theta: float, projection: str) -> float:
    return float(_radial_map(np.array([theta]), projection)[0])


def _diagonal_deg(h_deg: float, v_deg: float, projection: str) -> float:
    """Diagonal FOV from H and V through the projection's radial law r(theta):
    r(D/2)^2 = r(H/2)^2 + r(V/2)^2 (the corner's image height from its two components)."""
    rh = _radial(math.radians(h_deg / 2.0), projection)
    rv = _radial(math.radians(v_deg / 2.0), projection)
    rd = math.hypot(rh, rv)
    return 2.0 * math.degrees(float(inverse_radial(np.array([rd]), projection)[0]))


def fov_from_edge_poses(left: tuple[float, float], right: tuple[float, float],
                        top: tuple[float, float], bottom: tuple[float, float], *,
                        sigma_az_deg: tuple[float, float], sigma_el_deg: tuple[float, float],
                        projection: str = "rectilinear",
                        ifov: tuple[float, float] = (float("nan"), float("nan"))) -> FieldOfView:
    """FOV from the four edge poses (az, el) deg found in scan mode.

    Horizontal: the angle between the lines of sight of the left and right edge poses; vertical
    likewise (exact for the az-over-el gimbal). Diagonal: derived from H and V through the UUT's
    projection law, ``r(D/2)^2 = r(H/2)^2 + r(V/2)^2`` (``tan`` for rectilinear, ``theta`` for
    f-theta): exact for a distortion-free UUT with its principal point centred, stated in notes.
    Sigmas: the two edges' in quadrature; the diagonal's propagated numerically (GUM).
    """
    h = line_of_sight_angle_deg(left, right)
    v = line_of_sight_angle_deg(top, bottom)
    d = _diagonal_deg(h, v, projection)
    sh = math.hypot(*sigma_az_deg)
    sv = math.hypot(*sigma_el_deg)
    eps = 1e-4
    gh = (_diagonal_deg(h + eps, v, projection) - d) / eps
    gv = (_diagonal_deg(h, v + eps, projection) - d) / eps
    sd = math.hypot(gh * sh, gv * sv)
    return FieldOfView(h, v, d, sh, sv, sd, ifov[0], ifov[1], "scan",
                       (f"diagonal derived from H and V through the {projection} projection law "
                        "(distortion-free, centred principal point)",))


@dataclass(frozen=True)
class ScanFov:
    """Scan-mode result: the FOV and the four edge searches (left, right, top, bottom)."""

    fov: FieldOfView
    edges: Mapping[str, EdgeSearch]
    centre_pose_deg: tuple[float, float]

    def to_dict(self) -> dict[str, Any]:
        return {"fov": self.fov.to_dict(), "centre_pose_deg": list(self.centre_pose_deg),
                "edges": {k: v.to_dict() for k, v in self.edges.items()}}


def scan_fov(fraction_at_pose: Callable[[tuple[float, float]], tuple[float, float]],
             centre_pose_deg: Sequence[float], nominal: CameraGeometry, *,
             tolerance_deg: float = 0.02, stage_sigma_deg: float = 0.0,
             reference_rel_sigma: float = 0.0,
             limits_deg: Sequence[tuple[float, float]] | None = None,
             ifov: tuple[float, float] = (float("nan"), float("nan"))) -> ScanFov:
    """FOV in scan mode: from the aligned pose, step the pinhole out along azimuth (elevation
    held) and along elevation (azimuth held), each way, bisecting for the edge (`find_edge`).

    The first outside guess is 1.25 x the nominal half field beyond the centre, widened to 1.6 and
    2 x if the spot is still seen, never beyond `limits_deg` ((az_lo, az_hi), (el_lo, el_hi)).
    Positive azimuth moves the spot toward -x (left), positive elevation toward +y (down): see
    `analysis.geometry`.

    `reference_rel_sigma` is the relative 1-sigma of the reference (on-axis) flux the fractions
    are taken against. It moves both edges of an axis inward or outward together, so it enters
    each FOV linearly over the two edges, ``sigma_ref (1/2|s1| + 1/2|s2|)`` with s the
    fraction's slope per degree at each edge, added in quadrature to the edges' own sigmas.
    """
    model = fov_from_model(nominal)
    az0, el0 = float(centre_pose_deg[0]), float(centre_pose_deg[1])
    half = {"az": model.h_deg / 2.0, "el": model.v_deg / 2.0}
    edges: dict[str, EdgeSearch] = {}
    plan = {"left": ("az", +1.0), "right": ("az", -1.0), "top": ("el", -1.0),
            "bottom": ("el", +1.0)}
    for name, (axis, sign) in plan.items():
        k = 0 if axis == "az" else 1
        centre = az0 if axis == "az" else el0

        def at(angle: float, axis: str = axis) -> tuple[float, float]:
            return fraction_at_pose((angle, el0) if axis == "az" else (az0, angle))

        last_error: Exception | None = None
        for factor in (1.25, 1.6, 2.0):
            outside = centre + sign * factor * half[axis]
            if limits_deg is not None:
                lo, hi = limits_deg[k]
                outside = min(max(outside, lo), hi)
            try:
                edges[name] = find_edge(at, centre, outside, tolerance_deg=tolerance_deg,
                                        stage_sigma_deg=stage_sigma_deg)
                break
            except ValueError as exc:
                last_error = exc
                if "still on the detector" not in str(exc):
                    raise
        else:
            raise ValueError(f"{name} edge: {last_error}")
    def correlated(a: EdgeSearch, b: EdgeSearch) -> float:
        return reference_rel_sigma * (0.5 / abs(a.slope_per_deg) + 0.5 / abs(b.slope_per_deg))

    # Split the correlated term equally over the two edges' sigmas so the quadrature sum in
    # fov_from_edge_poses gives sqrt(s1^2 + s2^2 + c^2).
    def with_c(a: EdgeSearch, b: EdgeSearch) -> tuple[float, float]:
        c = correlated(a, b) / math.sqrt(2.0)
        return math.hypot(a.sigma_deg, c), math.hypot(b.sigma_deg, c)

    fov = fov_from_edge_poses((edges["left"].angle_deg, el0), (edges["right"].angle_deg, el0),
                              (az0, edges["top"].angle_deg), (az0, edges["bottom"].angle_deg),
                              sigma_az_deg=with_c(edges["left"], edges["right"]),
                              sigma_el_deg=with_c(edges["top"], edges["bottom"]),
                              projection=nominal.projection, ifov=ifov)
    return ScanFov(fov, edges, (az0, el0))


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
