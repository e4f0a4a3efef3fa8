"""Geometric distortion of a UUT from a pinhole grid (grid mode) or a scanned pinhole (scan mode).

Pixel positions are (x, y) = (column, row) at every boundary; arrays of points are (N, 2).
Directions are unit vectors (N, 3) in the camera frame of analysis.geometry.

Method
------
1. Fit of the camera model (analysis.distortion_fit): principal point cx, cy (the boresight:
   where the bench axis lands), roll, fx (effective focal length, hence IFOV), aspect, skew,
   Brown-Conrady k1, k2, k3, p1, p2 (D. C. Brown, Photogramm. Eng. 32:444, 1966; OpenCV calib3d
   convention). k1 is always fitted; p1+p2, k2 and k3 only where an F-test on the nested fits
   says the data support them (stated in the result). One plain least-squares pass; only when
   it leaves outliers (judged on the MAD scale, which they cannot inflate) a second pass
   without them, the terms chosen again. Points whose residual exceeds n_sigma robust sigmas (MAD, Rousseeuw & Croux 1993) and a
   floor in pixels are local defects.
2. Per point: ideal position (fitted paraxial model: same centre, scale, aspect, skew and roll,
   no distortion), error = measured - ideal (px and mrad), residual = measured - full model,
   and the local percent distortion 100 (r_measured - r_ideal) / r_ideal in normalized image
   coordinates (ISO 17850:2015 dot-chart method; ISO 9039:2008 for electro-optical systems;
   pincushion positive, barrel negative, W. J. Smith, Modern Optical Engineering, ch. 5).
3. Figures of the lens, not of the noise (analysis.distortion_figures): the maximum distortion
   is the local distortion of the *fitted model* of largest magnitude over the measured field
   (the convex hull of the measured points), with its 1-sigma from the fit covariance (delta
   method, GUM JCGM 100:2008). The worst single measured point is reported separately with its
   own sigma. Corner and edge figures say whether they are measured or extrapolated and how far
   beyond the measured field they lie.
4. Classification barrel / pincushion / mustache / none over the measured field: a distortion is
   named only when the fitted curve exceeds both the threshold and 3 of its own sigmas, so noise
   is never called distortion.
5. Verdicts through analysis.verdicts (value, 1-sigma, limit, margin, PASS/FAIL/MARGINAL) for the
   spec keys of DISTORTION_SPEC_KEYS.

When the data cannot support a result (too few matched points, most spots flagged, residuals far
above the noise, a fit at a bound of its physical range) the analysis raises DistortionRefused
with the cause instead of reporting numbers.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from analysis.centroid import Spot, SpotFlag
from analysis.distortion_figures import (Hull, local_distortion_percent, local_distortion_percent_coefficients,
                                         propagate)
from analysis.distortion_fit import (
    ALL_TERMS,
    DistortionRefused,
    FitModel,
    _sigma_array,
    choose_terms,
    fit_camera_model,
    select_terms,
)
from analysis.geometry import (
    BrownConrady,
    CameraGeometry,
    collimator_directions,
    field_angle_of_radius,
    field_angles,
    ideal_normalized,
    project,
    to_camera_frame,
)
from analysis.fast_median import median as _median
from analysis.matching import MatchResult, match_points
from analysis.verdicts import SpecKey, Verdict

__all__ = [
    "ALL_TERMS",
    "DISTORTION_SPEC_KEYS",
    "ClassificationRule",
    "Classification",
    "DistortionRefused",
    "FieldPoint",
    "FitModel",
    "Headline",
    "PointTable",
    "RadialCurve",
    "Verdict",
    "DistortionResult",
    "choose_terms",
    "fit_camera_model",
    "analyze_grid",
    "analyze_scan",
    "radial_distortion_percent",
]

# Spots with these flags are left out of the fit: their centroids are biased or ambiguous.
_UNUSABLE = SpotFlag.TRUNCATED | SpotFlag.MERGED | SpotFlag.NOT_CONVERGED | SpotFlag.BAD_PIXEL

# Refusal thresholds (our documented rules).
MIN_POINTS = 8                 # fewer cannot constrain centre, scale, roll, aspect, skew and k1
MIN_MATCHED_FRACTION = 0.5     # of the expected points that land inside the detector
MAX_FLAGGED_FRACTION = 0.5     # of the detected spots
MAX_OUTLIER_FRACTION = 0.25    # of the measured points: beyond that the model does not fit
MAX_REDUCED_CHI2 = 100.0       # residuals 10x the centroid noise: the model does not describe the data
SIGNIFICANCE_SIGMAS = 3.0      # a distortion is named only beyond this many sigmas


@dataclass(frozen=True)
class PointTable:
    """One row per point. Positions (N, 2) are (x, y) pixels; NaN where a point was not measured.

    error = measured - ideal (the distortion displacement); residual = measured - fitted.
    distortion_percent is the local radial distortion of the point (noisy near the centre);
    distortion_sigma_percent its 1-sigma from the centroid sigma; in_field_stats marks the
    points eligible for the worst-point figure (measured, not a defect, not near the centre).
    """

    labels: tuple[str, ...]
    expected_nominal_px: np.ndarray
    ideal_px: np.ndarray
    fitted_px: np.ndarray
    measured_px: np.ndarray
    sigma_px: np.ndarray
    error_px: np.ndarray
    error_mrad: np.ndarray
    error_fov_percent: np.ndarray
    field_angle_deg: np.ndarray
    radius_ideal_px: np.ndarray
    distortion_percent: np.ndarray
    residual_px: np.ndarray
    residual_sigmas: np.ndarray
    measured: np.ndarray
    used_in_fit: np.ndarray
    defect: np.ndarray
    in_field_stats: np.ndarray
    distortion_sigma_percent: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.labels)


@dataclass(frozen=True)
class RadialCurve:
    """Fitted radial distortion 100 (k1 r^2 + k2 r^4 + k3 r^6) against image height and field
    angle, sampled to the farthest corner, with its 1-sigma band."""

    radius_px: np.ndarray
    field_angle_deg: np.ndarray
    distortion_percent: np.ndarray
    measured_radius_max_px: float
    sigma_percent: np.ndarray | None = None


@dataclass(frozen=True)
class FieldPoint:
    """Fitted radial distortion at a named place of the detector (corner or edge midpoint).

    extrapolated: the place lies outside the measured field (hull of the measured points);
    beyond_px: its distance outside that hull in ideal image pixels (0 when measured);
    beyond_percent: its radius beyond the largest measured radius, percent of that radius;
    sigma_all_terms_percent: its sigma with every term the points allow free (extrapolation
    depends on terms the F-test may have left out).
    """

    name: str
    x_px: float
    y_px: float
    radius_px: float
    field_angle_deg: float
    distortion_percent: float
    extrapolated: bool
    sigma_percent: float = float("nan")
    beyond_px: float = 0.0
    beyond_percent: float = 0.0
    sigma_all_terms_percent: float = float("nan")

    @property
    def basis(self) -> str:
        if not self.extrapolated:
            return "measured"
        text = f"extrapolated {self.beyond_px:.0f} px ({self.beyond_percent:.0f} % in radius) beyond the measured field"
        if self.sigma_all_terms_percent > 1.2 * self.sigma_percent:
            text += (f"; sigma {self.sigma_percent:.2g} % with the terms the data support, "
                     f"{self.sigma_all_terms_percent:.2g} % with every term free")
        return text


@dataclass(frozen=True)
class ClassificationRule:
    """Thresholds of the classification, percent of image height (our rule, documented).

    none_below_percent: |distortion| under this over the measured field -> "none" (about the
    smallest distortion a viewer notices; distortion specs commonly start at 0.1-1 %, common
    practice). sign_change_percent: a mustache needs both signs beyond this. Every level must
    also exceed significance_sigmas of its own uncertainty.
    """

    none_below_percent: float = 0.1
    sign_change_percent: float = 0.05
    significance_sigmas: float = SIGNIFICANCE_SIGMAS


@dataclass(frozen=True)
class Classification:
    label: str
    threshold_percent: float
    reason: str


@dataclass(frozen=True)
class Headline:
    """The one number of a distortion run, the same on every plot and in the JSON."""

    key: str
    value: float
    sigma: float
    unit: str
    text: str


@dataclass(frozen=True)
class DistortionResult:
    """Everything the distortion analysis found; see module docstring for the method.

    max_distortion_percent: signed model distortion of largest magnitude over the measured
    field (sigma in max_distortion_sigma_percent); worst_point_percent: the single measured
    point of largest |local distortion| (noisy; sigma in worst_point_sigma_percent).
    """

    mode: str
    model: FitModel
    nominal: CameraGeometry
    points: PointTable
    curve: RadialCurve
    corners: tuple[FieldPoint, ...]
    edges: tuple[FieldPoint, ...]
    max_distortion_percent: float
    max_distortion_at_px: tuple[float, float]
    max_distortion_label: str
    classification: Classification
    boresight_offset_px: tuple[float, float]
    defect_threshold_px: float
    verdicts: tuple[Verdict, ...]
    n_missing: int
    n_extra: int
    match: MatchResult | None = None
    notes: tuple[str, ...] = field(default_factory=tuple)
    max_distortion_sigma_percent: float = float("nan")
    worst_point_percent: float = float("nan")
    worst_point_sigma_percent: float = float("nan")
    worst_point_label: str = ""
    boresight_offset_sigma_px: tuple[float, float] = (float("nan"), float("nan"))
    headline: Headline | None = None
    figures: Mapping[str, tuple[float, float]] = field(default_factory=dict)

    @property
    def passed(self) -> bool | None:
        """True/False when spec limits were given, None otherwise (MARGINAL does not fail)."""
        return None if not self.verdicts else not any(v.status == "FAIL" for v in self.verdicts)


# ----------------------------------------------------------------------------------------------
# Spec keys: each names exactly one quantity
# ----------------------------------------------------------------------------------------------

DISTORTION_SPEC_KEYS: Mapping[str, SpecKey] = {k.key: k for k in (
    SpecKey("max_distortion_percent", "largest |distortion| in the measured field", "%", "max",
            "largest |local distortion| 100 (|D(p)| - |p|) / |p| of the fitted Brown-Conrady model "
            "inside the convex hull of the measured points (not a single noisy point)",
            conditions=("field",)),
    SpecKey("max_corner_distortion_percent", "largest |corner distortion|", "%", "max",
            "largest |fitted radial distortion| at the four detector corners; extrapolated from the "
            "fitted model when a corner lies beyond the measured field, stated as such",
            conditions=("field",)),
    SpecKey("max_boresight_offset_px", "boresight offset", "px", "max",
            "|principal point - detector centre ((W-1)/2, (H-1)/2)|"),
    SpecKey("max_skew_deg", "|skew|", "deg", "max", "|skew angle of the pixel axes|"),
    SpecKey("max_roll_deg", "|roll|", "deg", "max", "|rotation of the detector about the line of sight|"),
    SpecKey("max_residual_rms_px", "RMS residual", "px", "max",
            "RMS of measured - fitted model over the points used in the fit"),
    SpecKey("max_defects", "local defects", "points", "max",
            "number of points flagged as local defects (residual beyond n_sigma robust sigmas)"),
    SpecKey("max_efl_error_percent", "|effective focal length error|", "%", "max",
            "|fitted effective focal length - nominal| / nominal"),
)}
# Older name, kept for callers that read the keys.
_SPEC_KEYS = DISTORTION_SPEC_KEYS


def radial_distortion_percent(d: BrownConrady, r_norm: np.ndarray) -> np.ndarray:
    """Radial distortion 100 (k1 r^2 + k2 r^4 + k3 r^6) at undistorted normalized radius r."""
    r2 = np.asarray(r_norm, dtype=float) ** 2
    return 100.0 * r2 * (d.k1 + r2 * (d.k2 + r2 * d.k3))


def _normalized_from_pixels(geom: CameraGeometry, px: np.ndarray) -> np.ndarray:
    """Remove the camera matrix: pixels (x, y) -> distorted normalized (x'', y'')."""
    cx, cy = geom.principal_point
    yn = (px[:, 1] - cy) / geom.fy
    xn = (px[:, 0] - cx) / geom.fx - math.tan(math.radians(geom.skew_deg)) * yn
    return np.column_stack([xn, yn])


def _undistorted_radius(d: BrownConrady, r_dist: np.ndarray) -> np.ndarray:
    """Solve r (1 + k1 r^2 + k2 r^4 + k3 r^6) = r_dist for r by Newton's method."""
    rd = np.asarray(r_dist, dtype=float)
    r = rd.copy()
    for _ in range(50):
        r2 = r * r
        f = r * (1 + r2 * (d.k1 + r2 * (d.k2 + r2 * d.k3))) - rd
        df = 1 + r2 * (3 * d.k1 + r2 * (5 * d.k2 + 7 * d.k3 * r2))
        step = f / np.where(np.abs(df) > 1e-12, df, 1e-12)
        r = r - step
        if np.all(np.abs(step) < 1e-13):
            break
    return r


def _ideal_to_pixels(geom: CameraGeometry, xy_norm: np.ndarray) -> np.ndarray:
    """Undistorted normalized (after roll) -> pixels through the fitted distortion and camera matrix."""
    from analysis.geometry import apply_brown_conrady

    q = apply_brown_conrady(np.asarray(xy_norm, float).reshape(-1, 2), geom.distortion)
    cx, cy = geom.principal_point
    t = math.tan(math.radians(geom.skew_deg))
    return np.column_stack([geom.fx * (q[:, 0] + t * q[:, 1]) + cx, geom.fy * q[:, 1] + cy])


_PLACES = ("top_left", "top_right", "bottom_left", "bottom_right", "left", "right", "top", "bottom")


def _place_pixels(g: CameraGeometry) -> np.ndarray:
    w, h = g.width, g.height
    mx, my = (w - 1) / 2.0, (h - 1) / 2.0
    return np.array([(0.0, 0.0), (w - 1.0, 0.0), (0.0, h - 1.0), (w - 1.0, h - 1.0),
                     (0.0, my), (w - 1.0, my), (mx, 0.0), (mx, h - 1.0)])


def _places_norm(g: CameraGeometry) -> np.ndarray:
    """Undistorted normalized positions (after roll) of the corners and edge midpoints."""
    return _undistort(_normalized_from_pixels(g, _place_pixels(g)), g.distortion)


def _undistort(xy: np.ndarray, d: BrownConrady) -> np.ndarray:
    """Inverse Brown-Conrady to 1e-13 (see _undistort_xy)."""
    x, y = _undistort_xy(xy[:, 0], xy[:, 1], d.k1, d.k2, d.k3, d.p1, d.p2)
    return np.column_stack([x, y])


def _undistort_xy(xd: np.ndarray, yd: np.ndarray, k1, k2, k3, p1, p2,
                  start: tuple[np.ndarray, np.ndarray] | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Inverse Brown-Conrady to 1e-13: Newton's method on D(p) = p_d with the analytic 2x2
    Jacobian of the map (quadratic convergence, 3-5 steps for camera lenses); the fixed-point
    iteration of cv2.undistortPoints takes over where Newton does not settle. The
    coefficients may be arrays broadcasting against the points (many models at once).
    start: a first guess (x, y) broadcasting against the result, e.g. the solution of a nearby
    model (the delta method's perturbed models then need a step or two)."""
    if start is None and np.size(xd) <= _SCALAR_NEWTON and all(np.ndim(k) == 0 for k in (k1, k2, k3, p1, p2)):
        return _undistort_few(np.asarray(xd, float), np.asarray(yd, float), float(k1), float(k2), float(k3),
                              float(p1), float(p2))
    if start is None:
        x, y = xd.copy(), yd.copy()
    else:
        x, y = (np.broadcast_to(v, xd.shape).astype(float) for v in start)
    with np.errstate(all="ignore"):
        for _ in range(12):
            r2 = x * x + y * y
            radial = 1.0 + r2 * (k1 + r2 * (k2 + r2 * k3))
            d_rad = k1 + r2 * (2.0 * k2 + 3.0 * r2 * k3)  # d radial / d r^2
            fx = x * radial + 2.0 * p1 * x * y + p2 * (r2 + 2.0 * x * x) - xd
            fy = y * radial + p1 * (r2 + 2.0 * y * y) + 2.0 * p2 * x * y - yd
            a = radial + 2.0 * x * x * d_rad + 2.0 * p1 * y + 6.0 * p2 * x
            b = 2.0 * x * y * d_rad + 2.0 * p1 * x + 2.0 * p2 * y
            c = radial + 2.0 * y * y * d_rad + 6.0 * p1 * y + 2.0 * p2 * x
            det = a * c - b * b  # the Jacobian is symmetric: [[a, b], [b, c]]
            sx = (c * fx - b * fy) / det
            sy = (a * fy - b * fx) / det
            x, y = x - sx, y - sy
            step = max(float(np.max(np.abs(sx), initial=0.0)), float(np.max(np.abs(sy), initial=0.0)))
            if step < 1e-13:
                return x, y
            if not np.isfinite(step):
                break
    x, y = xd.copy(), yd.copy()
    for _ in range(100):
        r2 = x * x + y * y
        radial = 1.0 + r2 * (k1 + r2 * (k2 + r2 * k3))
        nx = (xd - (2.0 * p1 * x * y + p2 * (r2 + 2.0 * x * x))) / radial
        ny = (yd - (p1 * (r2 + 2.0 * y * y) + 2.0 * p2 * x * y)) / radial
        done = max(float(np.max(np.abs(nx - x))), float(np.max(np.abs(ny - y)))) < 1e-13
        x, y = nx, ny
        if done:
            break
    return x, y


# Up to this many points Newton's method runs point by point in floats: array operations on a
# handful of numbers cost more than the arithmetic.
_SCALAR_NEWTON = 16


def _undistort_few(xd: np.ndarray, yd: np.ndarray, k1: float, k2: float, k3: float, p1: float,
                   p2: float) -> tuple[np.ndarray, np.ndarray]:
    """_undistort_xy for a few points and one model: the same Newton iteration per point."""
    xs, ys = [], []
    for xd_i, yd_i in zip(xd.ravel().tolist(), yd.ravel().tolist()):
        x, y = xd_i, yd_i
        ok = False
        for _ in range(12):
            r2 = x * x + y * y
            radial = 1.0 + r2 * (k1 + r2 * (k2 + r2 * k3))
            d_rad = k1 + r2 * (2.0 * k2 + 3.0 * r2 * k3)
            fx = x * radial + 2.0 * p1 * x * y + p2 * (r2 + 2.0 * x * x) - xd_i
            fy = y * radial + p1 * (r2 + 2.0 * y * y) + 2.0 * p2 * x * y - yd_i
            a = radial + 2.0 * x * x * d_rad + 2.0 * p1 * y + 6.0 * p2 * x
            b = 2.0 * x * y * d_rad + 2.0 * p1 * x + 2.0 * p2 * y
            c = radial + 2.0 * y * y * d_rad + 6.0 * p1 * y + 2.0 * p2 * x
            det = a * c - b * b
            if det == 0.0 or not math.isfinite(det):
                break
            sx = (c * fx - b * fy) / det
            sy = (a * fy - b * fx) / det
            x, y = x - sx, y - sy
            if max(abs(sx), abs(sy)) < 1e-13:
                ok = True
                break
            if not (math.isfinite(sx) and math.isfinite(sy)):
                break
        if not ok:  # Newton did not settle: the array version's fixed-point fallback
            xa, ya = _undistort_xy(np.array([xd_i]), np.array([yd_i]), np.array([k1]), k2, k3, p1, p2)
            x, y = float(xa[0]), float(ya[0])
        xs.append(x)
        ys.append(y)
    return np.array(xs).reshape(xd.shape), np.array(ys).reshape(yd.shape)


def _place_radial_percent(g: CameraGeometry) -> np.ndarray:
    p = _places_norm(g)
    return radial_distortion_percent(g.distortion, np.hypot(p[:, 0], p[:, 1]))


def _place_radial_percent_many(g: CameraGeometry, v: Mapping[str, np.ndarray],
                               start: np.ndarray | None = None) -> np.ndarray:
    """_place_radial_percent of many models of the detector of g at once (G, 8), from arrays
    (G,) of their values by term name: one undistortion for all of them (the delta method
    evaluates the same figure for every perturbed term). start: the places (8, 2) undistorted
    by a nearby model, where Newton's method starts."""
    px = _place_pixels(g)
    col = lambda name: np.asarray(v[name], dtype=float)[:, None]  # noqa: E731
    fx = col("fx")
    yn = (px[None, :, 1] - col("cy")) / (fx * col("aspect"))
    xn = (px[None, :, 0] - col("cx")) / fx - np.tan(np.radians(col("skew"))) * yn
    k1, k2, k3 = col("k1"), col("k2"), col("k3")
    x, y = _undistort_xy(xn, yn, k1, k2, k3, col("p1"), col("p2"),
                         start=None if start is None else (start[None, :, 0], start[None, :, 1]))
    r2 = x * x + y * y
    return 100.0 * r2 * (k1 + r2 * (k2 + r2 * k3))


def _field_points(model: FitModel, hull: Hull, r_meas_max: float,
                  full: FitModel | None = None) -> tuple[tuple[FieldPoint, ...], tuple[FieldPoint, ...]]:
    """Corners and edge midpoints: fitted radial distortion, sigma, measured or extrapolated.

    r_meas_max: largest measured undistorted normalized radius. full: the same data fitted with
    every term the points allow; beyond the measured field a term the F-test left out may still
    matter, so an extrapolated place also states its sigma under that model (for information;
    its own sigma is the selected model's, which the pull tests check).
    """
    g = model.geometry
    p = _places_norm(g)
    r = np.hypot(p[:, 0], p[:, 1])
    dist = radial_distortion_percent(g.distortion, r)
    sig = propagate(model, _place_radial_percent, many=lambda v: _place_radial_percent_many(g, v, p))
    beyond = hull.distance_outside(p) * g.fx
    sig_all = (propagate(full, _place_radial_percent, many=lambda v: _place_radial_percent_many(g, v, p))
               if full is not None else sig)
    theta = np.degrees(field_angle_of_radius(r, g.projection))
    px = _place_pixels(g)
    out = []
    for i, name in enumerate(_PLACES):
        extrap = bool(beyond[i] > 0.5)  # more than half a pixel outside the measured field
        out.append(FieldPoint(name, float(px[i, 0]), float(px[i, 1]), float(r[i] * g.fx), float(theta[i]),
                              float(dist[i]), extrap, float(sig[i]), float(beyond[i]) if extrap else 0.0,
                              float(max(0.0, 100.0 * (r[i] / r_meas_max - 1.0))) if extrap and r_meas_max > 0 else 0.0,
                              float(sig_all[i])))
    return tuple(out[:4]), tuple(out[4:])


def _curve_sigma(model: FitModel, r_norm: np.ndarray) -> np.ndarray:
    """1-sigma of 100 (k1 r^2 + k2 r^4 + k3 r^6) from the covariance of the fitted k terms."""
    cov = model.covariance
    r2 = np.asarray(r_norm, float) ** 2
    if cov is None:
        return np.full(r2.shape, np.nan)
    powers = {"k1": 1, "k2": 2, "k3": 3}
    idx = [(i, powers[t]) for i, t in enumerate(model.fitted_terms) if t in powers]
    if not idx:
        return np.zeros(r2.shape)
    g = np.array([100.0 * r2 ** p for _, p in idx])
    sub = cov[np.ix_([i for i, _ in idx], [i for i, _ in idx])]
    return np.sqrt(np.maximum(np.einsum("pm,pq,qm->m", g, sub, g), 0.0))


def _classify(curve: RadialCurve, rule: ClassificationRule) -> Classification:
    """Label of the fitted radial curve over the detector (to the farthest corner); a level
    counts only beyond the threshold and k of its own sigmas, so noise (and an extrapolation
    the data do not pin down) is never called distortion."""
    d = curve.distortion_percent
    s = curve.sigma_percent if curve.sigma_percent is not None else np.zeros_like(d)
    s = np.where(np.isfinite(s), s, np.inf)
    k = rule.significance_sigmas
    t = rule.none_below_percent
    # The most significant level beyond the threshold decides; none when no level is significant.
    signif = (np.abs(d) >= t) & (np.abs(d) >= k * s)
    where = lambda i: ("measured field" if curve.radius_px[i] <= curve.measured_radius_max_px * (1 + 1e-9)
                       else "extrapolated")  # noqa: E731
    if not signif.any():
        i = int(np.argmax(np.abs(d)))
        why = (f"below the {t:g} % threshold" if abs(d[i]) < t
               else f"within {k:g} sigma (sigma {s[i]:.3f} %) of zero")
        return Classification("none", t, f"fitted radial distortion at most {d[i]:+.3f} % "
                                         f"({where(i)}): {why}")
    sc = rule.sign_change_percent
    pos = (d > sc) & (d > k * s)
    neg = (d < -sc) & (-d > k * s)
    if pos.any() and neg.any():
        sign = np.signbit(d[1:]) != np.signbit(d[:-1])
        j = int(np.argmax(sign)) if sign.any() else 0
        return Classification(
            "mustache", sc,
            f"radial curve changes sign at {curve.radius_px[j]:.0f} px ({curve.field_angle_deg[j]:.1f} deg, "
            f"{where(j)}): from {d.min():+.3f} % to {d.max():+.3f} %, both beyond +/-{sc:g} % and {k:g} sigma")
    i = int(np.argmax(np.where(signif, np.abs(d), -np.inf)))
    label = "barrel" if d[i] < 0 else "pincushion"
    return Classification(label, t, f"fitted radial distortion reaches {d[i]:+.3f} +/- {s[i]:.3f} % "
                                    f"({where(i)}), beyond {t:g} % and {k:g} sigma, one sign")


def _verdicts(spec: Mapping[str, float] | None, figures: Mapping[str, tuple[float, float]],
              conditions: Mapping[str, Mapping[str, object]]) -> tuple[Verdict, ...]:
    if not spec:
        return ()
    unknown = [k for k in spec if k not in DISTORTION_SPEC_KEYS]
    if unknown:
        raise ValueError(f"unknown distortion spec limit(s) {unknown}; known: {sorted(DISTORTION_SPEC_KEYS)}")
    out = []
    for key, limit in spec.items():
        value, sigma = figures[key]
        out.append(DISTORTION_SPEC_KEYS[key].judge(value, sigma, float(limit), conditions.get(key, {})))
    return tuple(out)


def _fit_with_outliers(m_xy: np.ndarray, m_dir: np.ndarray, nominal: CameraGeometry, sig_fit: np.ndarray | None,
                       terms: Sequence[str] | None, loss: str, n_sigma: float,
                       floor_px: float, allowed: Sequence[str] | None = None
                       ) -> tuple[FitModel, np.ndarray, np.ndarray, float]:
    """One plain pass (terms chosen by the data); a second only when it leaves outliers.

    allowed: the terms the points could support (choose_terms), when the caller has them.
    Returns the model, the mask of points kept in the fit, the normalized residuals of every
    point against the model (N, 2) and their robust scale over the kept points.
    """
    s_px = _sigma_array(sig_fit, len(m_xy))
    if allowed is None:
        allowed = terms if terms is not None else choose_terms(ideal_normalized(nominal, m_dir))

    def fit(keep: np.ndarray) -> tuple[FitModel, np.ndarray]:
        sf = None if sig_fit is None else sig_fit[keep]
        if terms is not None:
            return fit_camera_model(m_xy[keep], m_dir[keep], nominal, sigma_px=sf, terms=terms,
                                    term_choice=("terms given by the caller",))
        return select_terms(m_xy[keep], m_dir[keep], nominal, sigma_px=sf, allowed=allowed)

    keep = np.ones(len(m_xy), dtype=bool)
    if loss != "linear":
        robust, r = fit_camera_model(m_xy, m_dir, nominal, sigma_px=sig_fit, terms=allowed, loss=loss,
                                     f_scale=3.0 if sig_fit is not None else 0.05)
        keep = ~_flag(r, s_px, _robust_scale(r), n_sigma, floor_px)
    model, _ = fit(keep)
    r = (m_xy - project(model.geometry, m_dir, include_defects=False)) / s_px
    scale = _robust_scale(r[keep])
    out = _flag(r, s_px, scale, n_sigma, floor_px)
    if out.any() and not np.array_equal(~out, keep):
        # Outliers (flagged on the robust MAD scale, which they cannot inflate): fit again
        # without them; the defects are then flagged once more against that model.
        keep = ~out
        if keep.sum() >= MIN_POINTS:
            model, _ = fit(keep)
            r = (m_xy - project(model.geometry, m_dir, include_defects=False)) / s_px
            scale = _robust_scale(r[keep])
    return model, keep, r, scale


def _analyze(
    mode: str,
    measured: np.ndarray,
    sigma: np.ndarray,
    directions: np.ndarray,
    nominal: CameraGeometry,
    labels: Sequence[str],
    spec: Mapping[str, float] | None,
    terms: Sequence[str] | None,
    loss: str,
    n_sigma: float,
    defect_floor_px: float,
    rule: ClassificationRule,
    min_radius_fraction: float,
    n_extra: int,
    match: MatchResult | None,
    notes: list[str],
    expected_nominal: np.ndarray | None = None,
) -> DistortionResult:
    n = len(directions)
    have = np.all(np.isfinite(measured), axis=1)
    if expected_nominal is None:
        expected_nominal = project(nominal.replace(defects=()), directions, include_defects=False)
    in_frame = (np.all(np.isfinite(expected_nominal), axis=1)
                & (expected_nominal[:, 0] > -0.5) & (expected_nominal[:, 0] < nominal.width - 0.5)
                & (expected_nominal[:, 1] > -0.5) & (expected_nominal[:, 1] < nominal.height - 0.5))
    n_have = int(have.sum())
    if n_have < MIN_POINTS:
        raise DistortionRefused(
            f"only {n_have} of {n} points were measured; at least {MIN_POINTS} are needed. Check the "
            "focus, the detection threshold, the target and the collimator and UUT focal lengths")
    if n_have < MIN_MATCHED_FRACTION * int(in_frame.sum()):
        raise DistortionRefused(
            f"only {n_have} of the {int(in_frame.sum())} points expected inside the frame were matched "
            f"(under {MIN_MATCHED_FRACTION:.0%}); the pattern found is not the expected one. Check "
            "the target, the collimator and UUT focal lengths and the spot detection")
    m_xy, m_sig, m_dir = measured[have], sigma[have], directions[have]
    sigma_given = bool(np.isfinite(m_sig).all())
    sig_fit = m_sig if sigma_given else None
    allowed = tuple(terms) if terms is not None else choose_terms(ideal_normalized(nominal, m_dir))
    model, keep, r_all, scale = _fit_with_outliers(m_xy, m_dir, nominal, sig_fit, terms, loss, n_sigma,
                                                   defect_floor_px, allowed)
    if (~keep).sum() > MAX_OUTLIER_FRACTION * len(keep):
        raise DistortionRefused(
            f"{int((~keep).sum())} of {len(keep)} points do not follow the camera model (more than "
            f"{MAX_OUTLIER_FRACTION:.0%}); mismatched spots or a broken optic. Check the target and "
            "the spot detection")
    if model.at_bound:
        raise DistortionRefused(
            f"the fit ended at the edge of the physical range of {', '.join(model.at_bound)} "
            f"({', '.join(f'{t} = {_term_value(model, t):.4g}' for t in model.at_bound)}); the data do "
            "not determine the camera. Check the nominal geometry (focal length, pixel pitch, size)")
    if sigma_given and model.reduced_chi2 > MAX_REDUCED_CHI2:
        raise DistortionRefused(
            f"the residuals are {math.sqrt(model.reduced_chi2):.0f}x the centroid noise (reduced "
            f"chi-square {model.reduced_chi2:.3g} > {MAX_REDUCED_CHI2:g}); the camera model does not "
            "describe these spots. Check for mismatched spots, a wrong projection or strong local defects")
    notes.extend(model.term_choice)
    geom = model.geometry
    s_px = _sigma_array(sig_fit, len(m_xy))
    defect_m = _flag(r_all, s_px, scale, n_sigma, defect_floor_px)
    res_sig_m = np.hypot(*r_all.T) / scale
    if sig_fit is None:
        s_px = s_px * scale  # unit weights: the robust scale is the per-point sigma in px
        scale = 1.0
    threshold_px = float(max(defect_floor_px, n_sigma * scale * _median(np.hypot(*s_px.T)) / math.sqrt(2)))

    # Per-point table (all points, NaN where not measured).
    nan2 = np.full((n, 2), np.nan)
    # One projection for both: ideal = camera matrix only, fitted = distortion then camera
    # matrix (analysis.geometry.project without defects, term by term).
    ideal_n = ideal_normalized(geom, directions)
    ideal = _ideal_to_pixels(geom.replace(distortion=BrownConrady(), defects=()), ideal_n)
    fitted = _ideal_to_pixels(geom, ideal_n)
    meas_full = nan2.copy()
    meas_full[have] = m_xy
    sig_full = nan2.copy()
    sig_full[have] = s_px
    error = meas_full - ideal
    error_mrad = np.column_stack([error[:, 0] * 1000.0 / geom.fx, error[:, 1] * 1000.0 / geom.fy])
    diag = math.hypot(geom.width, geom.height)
    err_fov = 100.0 * np.hypot(error[:, 0], error[:, 1]) / diag
    theta = np.degrees(field_angles(directions))
    r_ideal = np.hypot(ideal_n[:, 0], ideal_n[:, 1])
    meas_n = _normalized_from_pixels(geom, meas_full)
    r_meas = np.hypot(meas_n[:, 0], meas_n[:, 1])
    with np.errstate(divide="ignore", invalid="ignore"):
        dist_pct = np.where(r_ideal > 0, 100.0 * (r_meas - r_ideal) / r_ideal, np.nan)
        # Radial centroid sigma over the ideal radius (pixels along the radial direction).
        u = (ideal - np.array(geom.principal_point)) / np.hypot(*(ideal - np.array(geom.principal_point)).T)[:, None]
        sig_r = np.hypot(u[:, 0] * sig_full[:, 0], u[:, 1] * sig_full[:, 1])
        dist_sig = np.where(r_ideal > 0, 100.0 * sig_r / (r_ideal * geom.fx), np.nan)
    residual = meas_full - fitted
    res_sig = nan2[:, 0].copy()
    res_sig[have] = res_sig_m
    defect = np.zeros(n, dtype=bool)
    defect[np.nonzero(have)[0][defect_m]] = True
    used = np.zeros(n, dtype=bool)
    used[np.nonzero(have)[0][keep]] = True
    r_ideal_px = r_ideal * geom.fx
    r_lim = min_radius_fraction * float(np.nanmax(np.where(have, r_ideal_px, np.nan)))
    in_stats = have & ~defect & (r_ideal_px >= r_lim)
    points = PointTable(
        labels=tuple(labels), expected_nominal_px=expected_nominal, ideal_px=ideal, fitted_px=fitted,
        measured_px=meas_full, sigma_px=sig_full, error_px=error, error_mrad=error_mrad,
        error_fov_percent=err_fov, field_angle_deg=theta, radius_ideal_px=r_ideal_px,
        distortion_percent=dist_pct, residual_px=residual, residual_sigmas=res_sig, measured=have,
        used_in_fit=used, defect=defect, in_field_stats=in_stats, distortion_sigma_percent=dist_sig,
    )

    # The measured field: hull of the measured points in undistorted normalized coordinates.
    hull = Hull(ideal_n[have])
    r_meas_max_n = float(np.nanmax(np.where(have, r_ideal, np.nan)))
    full = None
    if set(allowed) - set(model.fitted_terms):
        # Terms held fixed by the F-test: refit with all of them for the extrapolated figures.
        sf = None if sig_fit is None else sig_fit[keep]
        full, _ = fit_camera_model(m_xy[keep], m_dir[keep], nominal, sigma_px=sf, terms=allowed,
                                   start=model.geometry)
    corners, edges = _field_points(model, hull, r_meas_max_n, full)
    r_top = max([c.radius_px / geom.fx for c in corners] + [r_meas_max_n])
    rr = np.linspace(0.0, r_top, 256)
    rr = np.unique(np.append(rr, r_meas_max_n))
    curve = RadialCurve(radius_px=rr * geom.fx, field_angle_deg=np.degrees(field_angle_of_radius(rr, geom.projection)),
                        distortion_percent=radial_distortion_percent(geom.distortion, rr),
                        measured_radius_max_px=r_meas_max_n * geom.fx, sigma_percent=_curve_sigma(model, rr))

    # Maximum of the fitted model over the measured field, with its sigma (delta method).
    samples = hull.samples()
    pct = local_distortion_percent(geom.distortion, samples)
    k = int(np.argmax(np.abs(pct)))
    at = samples[k]
    max_d = float(pct[k])
    max_sig = float(propagate(model, lambda g: local_distortion_percent(g.distortion, at[None, :]),
                              many=lambda v: local_distortion_percent_coefficients(
                                  v["k1"], v["k2"], v["k3"], v["p1"], v["p2"], at[None, :]))[0])
    at_px = _ideal_to_pixels(geom, at[None, :])[0]
    max_at = (float(at_px[0]), float(at_px[1]))
    near = np.where(have, np.hypot(*(ideal - at_px).T), np.inf)
    max_label = labels[int(np.argmin(near))] if have.any() else ""
    # The worst single measured point, reported beside it (never instead of it).
    if in_stats.any():
        j = int(np.nanargmax(np.where(in_stats, np.abs(dist_pct), -np.inf)))
        worst, worst_sig, worst_label = float(dist_pct[j]), float(dist_sig[j]), labels[j]
    else:
        worst, worst_sig, worst_label = float("nan"), float("nan"), ""
        notes.append("no point far enough from the centre for a per-point percent distortion")
    extrap = [c for c in corners if c.extrapolated]
    if extrap:
        far = max(extrap, key=lambda c: c.beyond_px)
        notes.append(f"corner distortion extrapolated from the fitted model beyond the measured field "
                     f"(up to {far.beyond_px:.0f} px, {far.beyond_percent:.0f} % in radius, at {far.name})")
    cls = _classify(curve, rule)
    offset = (model.cx - (geom.width - 1) / 2.0, model.cy - (geom.height - 1) / 2.0)
    off_sig = (model.sigma("cx"), model.sigma("cy"))
    off_mag = math.hypot(*offset)
    worst_corner = max(corners, key=lambda c: abs(c.distortion_percent))
    efl_err = 100.0 * (geom.focal_length_mm - nominal.focal_length_mm) / nominal.focal_length_mm
    n_used = int(keep.sum())
    figures = {
        "max_distortion_percent": (abs(max_d), max_sig),
        "max_corner_distortion_percent": (abs(worst_corner.distortion_percent), worst_corner.sigma_percent),
        "max_boresight_offset_px": (off_mag, math.hypot(offset[0] * off_sig[0], offset[1] * off_sig[1]) / off_mag
                                    if off_mag > 0 else math.hypot(*off_sig)),
        "max_skew_deg": (abs(geom.skew_deg), model.sigma("skew")),
        "max_roll_deg": (abs(geom.roll_deg), model.sigma("roll")),
        "max_residual_rms_px": (model.rms_residual_px, model.rms_residual_px / math.sqrt(2.0 * max(1, n_used))),
        "max_defects": (float(defect.sum()), 0.0),
        "max_efl_error_percent": (abs(efl_err), 100.0 * model.sigma("fx") / nominal.fx),
    }
    field_text = f"measured field: hull of {n_have} points, to {r_meas_max_n * geom.fx:.0f} px from the centre"
    conditions = {
        "max_distortion_percent": {"mode": mode, "field": field_text, "at_px": list(max_at)},
        "max_corner_distortion_percent": {"mode": mode, "corner": worst_corner.name, "basis": worst_corner.basis},
    }
    for key in figures:
        conditions.setdefault(key, {"mode": mode, "points": n_used})
    basis = "fitted model over the measured field"
    headline = Headline("max_distortion_percent", max_d, max_sig, "%",
                        f"max distortion {_rounded(max_d, max_sig)} % ({basis})")
    return DistortionResult(
        mode=mode, model=model, nominal=nominal, points=points, curve=curve, corners=corners, edges=edges,
        max_distortion_percent=max_d, max_distortion_at_px=max_at, max_distortion_label=max_label,
        classification=cls, boresight_offset_px=offset, defect_threshold_px=threshold_px,
        verdicts=_verdicts(spec, figures, conditions), n_missing=int((~have).sum()), n_extra=n_extra, match=match,
        notes=tuple(notes), max_distortion_sigma_percent=max_sig, worst_point_percent=worst,
        worst_point_sigma_percent=worst_sig, worst_point_label=worst_label, boresight_offset_sigma_px=off_sig,
        headline=headline, figures=figures,
    )


def _term_value(model: FitModel, term: str) -> float:
    from analysis.distortion_fit import _values

    return _values(model.geometry)[term]


def _rounded(value: float, sigma: float) -> str:
    """value +/- sigma with the sigma to two significant digits (GUM 7.2.6 practice)."""
    if not (math.isfinite(value) and math.isfinite(sigma)) or sigma <= 0:
        return f"{value:+.3f}"
    digits = max(0, 1 - int(math.floor(math.log10(sigma))))
    return f"{value:+.{digits}f} +/- {sigma:.{digits}f}"


def _robust_scale(r: np.ndarray) -> float:
    """MAD-based sigma of normalized residual components (Rousseeuw & Croux 1993)."""
    v = np.asarray(r, dtype=float).ravel()
    v = v[np.isfinite(v)]
    if v.size == 0:
        return 1.0
    s = 1.4826 * _median(np.abs(v - _median(v)))
    return s if s > 0 else (float(np.std(v)) or 1e-12)


def _flag(r: np.ndarray, s_px: np.ndarray, scale: float, n_sigma: float, floor_px: float) -> np.ndarray:
    """Points whose residual exceeds n_sigma robust sigmas and the floor in pixels."""
    mag_sig = np.hypot(r[:, 0], r[:, 1]) / scale
    mag_px = np.hypot(r[:, 0] * s_px[:, 0], r[:, 1] * s_px[:, 1])
    return (mag_sig > n_sigma) & (mag_px > floor_px)


def _spot_arrays(spots_or_xy: Sequence[Spot] | np.ndarray, sigma_px: np.ndarray | float | None) -> tuple[np.ndarray, np.ndarray]:
    if isinstance(spots_or_xy, np.ndarray) or (len(spots_or_xy) and not isinstance(spots_or_xy[0], Spot)):
        xy = np.asarray(spots_or_xy, dtype=float).reshape(-1, 2)
        sig = _sigma_or_nan(sigma_px, len(xy))
        return xy, sig
    rows = np.array([(s.x, s.y, s.sigma_x, s.sigma_y) for s in spots_or_xy if not _unusable(s)],
                    dtype=float).reshape(-1, 4)
    xy, sig = rows[:, :2], rows[:, 2:]
    if sigma_px is not None:
        sig = _sigma_or_nan(sigma_px, len(xy))
    return xy, sig


_UNUSABLE_BITS = _UNUSABLE.value


def _unusable(spot: Spot) -> bool:
    """Whether a spot's flags keep it out of the fit (on the flag bits: a test per spot of a
    large grid, where the Flag operators cost more than the rest of the bookkeeping)."""
    return bool(spot.flags._value_ & _UNUSABLE_BITS)


def _refuse_if_mostly_flagged(spots: Sequence[Spot | object | None] | np.ndarray) -> None:
    """Refuse when most detected spots carry a flag that keeps them out of the fit."""
    if isinstance(spots, np.ndarray):
        return
    found = [s for s in spots if isinstance(s, Spot)]
    bad = [s for s in found if _unusable(s)]
    if found and len(bad) > MAX_FLAGGED_FRACTION * len(found):
        counts: dict[str, int] = {}
        for s in bad:
            for f in SpotFlag:
                if f and f in _UNUSABLE and s.flags & f:
                    counts[f.name or ""] = counts.get(f.name or "", 0) + 1
        raise DistortionRefused(
            f"{len(bad)} of {len(found)} spots are flagged unusable ({', '.join(f'{k}: {v}' for k, v in counts.items())}); "
            "check the spot size against the window, the focus, and the grid pitch (spots too close merge)")


def _sigma_or_nan(sigma_px: np.ndarray | float | None, n: int) -> np.ndarray:
    if sigma_px is None:
        return np.full((n, 2), np.nan)
    return _sigma_array(sigma_px, n)


def analyze_grid(
    spots_or_xy: Sequence[Spot] | np.ndarray,
    expected_directions_cam: np.ndarray,
    nominal: CameraGeometry,
    *,
    labels: Sequence[str] | None = None,
    sigma_px: np.ndarray | float | None = None,
    spec: Mapping[str, float] | None = None,
    terms: Sequence[str] | None = None,
    loss: str = "linear",
    assume_matched: bool = False,
    gate_px: float | None = None,
    n_sigma: float = 5.0,
    defect_floor_px: float = 0.1,
    rule: ClassificationRule = ClassificationRule(),
    min_radius_fraction: float = 0.25,
) -> DistortionResult:
    """Distortion from one frame of a pinhole grid.

    spots_or_xy: detected Spots (flagged truncated/merged ones are left out) or an (M, 2) array
    of (x, y) pixels. expected_directions_cam: (N, 3) directions of the grid's pinholes in the
    camera frame (geometry.collimator_directions then to_camera_frame). Spots are paired with
    the nominal projections by analysis.matching unless assume_matched (then row i of the
    measured array belongs to direction i; NaN rows are missing points). sigma_px overrides the
    spots' own sigmas. spec: limits such as {"max_distortion_percent": 2.0}. loss: "linear"
    (default) for one plain least-squares pass, a second only when it leaves outliers;
    "soft_l1" adds a robust first pass (analysis.distortion_fit's solver) that keeps defects out.
    min_radius_fraction: points nearer the centre than this fraction of the measured field are
    left out of the maximum (their percentage is noise over a tiny radius).
    """
    dirs = np.asarray(expected_directions_cam, dtype=float).reshape(-1, 3)
    n = len(dirs)
    labels = tuple(labels) if labels is not None else tuple(f"p{i}" for i in range(n))
    if len(labels) != n:
        raise ValueError(f"{len(labels)} labels for {n} expected points")
    _refuse_if_mostly_flagged(spots_or_xy)
    xy, sig = _spot_arrays(spots_or_xy, sigma_px)
    notes: list[str] = []
    measured = np.full((n, 2), np.nan)
    sigma = np.full((n, 2), np.nan)
    match = None
    n_extra = 0
    expected = None
    if assume_matched:
        if len(xy) != n:
            raise ValueError(f"assume_matched needs one measured row per expected point ({n}), got {len(xy)}")
        measured, sigma = xy, sig
    else:
        expected = project(nominal.replace(defects=()), dirs, include_defects=False)
        try:
            match = match_points(xy, expected, gate_px=gate_px)
        except ValueError as exc:
            raise DistortionRefused(str(exc)) from exc
        measured[match.pairs[:, 1]] = xy[match.pairs[:, 0]]
        sigma[match.pairs[:, 1]] = sig[match.pairs[:, 0]]
        n_extra = len(match.unmatched_detected)
        if n_extra:
            notes.append(f"{n_extra} detected spot(s) matched no expected point (hot pixel, reflection?)")
    if np.isnan(sigma).any() and not np.isnan(sigma).all():
        sigma = np.where(np.isnan(sigma), _median(sigma[~np.isnan(sigma)]), sigma)  # nanmedian, cheaper
    return _analyze("grid", measured, sigma, dirs, nominal, labels, spec, terms, loss, n_sigma, defect_floor_px,
                    rule, min_radius_fraction, n_extra, match, notes, expected)


def analyze_scan(
    measured: Sequence[Spot | tuple[float, float] | None],
    poses_deg: np.ndarray,
    nominal: CameraGeometry,
    *,
    pinhole_mm: tuple[float, float] = (0.0, 0.0),
    collimator_focal_mm: float = 1000.0,
    labels: Sequence[str] | None = None,
    sigma_px: np.ndarray | float | None = None,
    spec: Mapping[str, float] | None = None,
    terms: Sequence[str] | None = None,
    loss: str = "linear",
    n_sigma: float = 5.0,
    defect_floor_px: float = 0.1,
    rule: ClassificationRule = ClassificationRule(),
    min_radius_fraction: float = 0.25,
) -> DistortionResult:
    """Distortion from one pinhole seen at a grid of stage poses (scan mode).

    measured[i]: the centroid for pose i (a Spot, an (x, y) pair, or None when no spot was
    found). poses_deg: (N, 2) azimuth, elevation in degrees. The expected direction of each
    pose is the pinhole's collimated beam turned into the camera frame by the gimbal rotation
    (geometry.to_camera_frame); then the same fit and figures as grid mode.
    """
    poses = np.asarray(poses_deg, dtype=float).reshape(-1, 2)
    if len(poses) != len(measured):
        raise ValueError(f"{len(measured)} centroids for {len(poses)} stage poses; they must pair up")
    beam = collimator_directions(np.array([pinhole_mm], dtype=float), collimator_focal_mm)
    dirs = np.vstack([to_camera_frame(beam, az, el) for az, el in poses])
    n = len(poses)
    xy = np.full((n, 2), np.nan)
    sig = np.full((n, 2), np.nan)
    for i, m in enumerate(measured):
        if m is None:
            continue
        if isinstance(m, Spot):
            if m.flags & _UNUSABLE:
                continue
            xy[i] = (m.x, m.y)
            sig[i] = (m.sigma_x, m.sigma_y)
        else:
            xy[i] = m
    if sigma_px is not None:
        sig = _sigma_array(sigma_px, n)
    if np.isnan(sig).any() and not np.isnan(sig).all():
        sig = np.where(np.isnan(sig), np.median(sig[~np.isnan(sig)]), sig)  # nanmedian, cheaper
    _refuse_if_mostly_flagged(list(measured))
    labels = tuple(labels) if labels is not None else tuple(f"az{az:+.2f}_el{el:+.2f}" for az, el in poses)
    return _analyze("scan", xy, sig, dirs, nominal, labels, spec, terms, loss, n_sigma, defect_floor_px,
                    rule, min_radius_fraction, 0, None, [])
