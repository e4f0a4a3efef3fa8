"""Geometric distortion of a UUT from a pinhole grid (grid mode) or a scanned pinhole (scan mode).

Pixel positions are (x, y) = (column, row) at every boundary; arrays of points are (N, 2).
Directions are unit vectors (N, 3) in the camera frame of analysis.geometry.

Method
------
1. Fit (scipy.optimize.least_squares, weighted by the centroid sigmas) of the camera model of
   analysis.geometry to the measured spots: principal point cx, cy (the boresight: where the
   bench axis lands), roll, fx (effective focal length, hence IFOV), aspect fy/fx, skew, radial
   k1, k2, k3 and tangential p1, p2 (Brown-Conrady, D. C. Brown, Photogramm. Eng. 32:444, 1966;
   OpenCV calib3d convention and order). Which terms are free follows from the data (see
   choose_terms). A robust pass (soft-L1 loss) finds outliers; the final pass is plain least
   squares without them, and the parameter covariance is (J^T J)^-1 times the reduced chi-square
   (standard nonlinear least-squares practice, e.g. Press et al., Numerical Recipes, ch. 15).
2. Decomposition per point: ideal position (fitted paraxial model: same centre, scale, aspect,
   skew and roll, no distortion), error vector = measured - ideal (px and mrad), residual =
   measured - full model. Local defects: |residual| above n_sigma robust sigmas (MAD-based,
   Rousseeuw & Croux 1993) and above a floor in pixels.
3. Percent distortion 100 (r_measured - r_ideal) / r_ideal in normalized image coordinates
   (camera matrix removed), the ideal radius from the paraxial scale (ISO 17850:2015 dot-chart
   method; ISO 9039:2008 for electro-optical systems; pincushion positive, barrel negative,
   W. J. Smith, Modern Optical Engineering, ch. 5).
4. Radial curve 100 (k1 r^2 + k2 r^4 + k3 r^6) of the fitted model, its values at the detector's
   corners and edge midpoints, and the classification barrel / pincushion / mustache / none.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize

from analysis.centroid import Spot, SpotFlag
from analysis.geometry import (
    BrownConrady,
    CameraGeometry,
    collimator_directions,
    field_angles,
    ideal_normalized,
    project,
    to_camera_frame,
)
from analysis.matching import MatchResult, match_points

__all__ = [
    "ALL_TERMS",
    "ClassificationRule",
    "Classification",
    "FieldPoint",
    "FitModel",
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

ALL_TERMS = ("cx", "cy", "roll", "fx", "aspect", "skew", "k1", "k2", "p1", "p2", "k3")

# Spots with these flags are left out of the fit: their centroids are biased or ambiguous.
_UNUSABLE = SpotFlag.TRUNCATED | SpotFlag.MERGED | SpotFlag.NOT_CONVERGED | SpotFlag.BAD_PIXEL


@dataclass(frozen=True)
class FitModel:
    """Fitted camera model with 1-sigma uncertainties; distortion in OpenCV's convention."""

    geometry: CameraGeometry
    fitted_terms: tuple[str, ...]
    sigmas: Mapping[str, float]
    reduced_chi2: float
    n_points: int
    rms_residual_px: float

    @property
    def fx(self) -> float:
        return self.geometry.fx

    @property
    def fy(self) -> float:
        return self.geometry.fy

    @property
    def cx(self) -> float:
        return self.geometry.principal_point[0]

    @property
    def cy(self) -> float:
        return self.geometry.principal_point[1]

    @property
    def distortion(self) -> BrownConrady:
        return self.geometry.distortion

    @property
    def effective_focal_length_mm(self) -> float:
        return self.geometry.focal_length_mm

    @property
    def ifov_mrad(self) -> float:
        return self.geometry.ifov_mrad

    def sigma(self, term: str) -> float:
        """1-sigma of a term (0 when the term was held fixed)."""
        return float(self.sigmas.get(term, 0.0))


@dataclass(frozen=True)
class PointTable:
    """One row per point. Positions (N, 2) are (x, y) pixels; NaN where a point was not measured.

    error = measured - ideal (the distortion displacement); residual = measured - fitted.
    distortion_percent is the local radial distortion; in_field_stats marks the points used for
    the maximum (measured, not a defect, far enough from the centre for a stable percentage).
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

    def __len__(self) -> int:
        return len(self.labels)


@dataclass(frozen=True)
class RadialCurve:
    """Fitted radial distortion against image height and field angle (sampled to the corner)."""

    radius_px: np.ndarray
    field_angle_deg: np.ndarray
    distortion_percent: np.ndarray
    measured_radius_max_px: float


@dataclass(frozen=True)
class FieldPoint:
    """Fitted radial distortion at a named place of the detector (corner or edge midpoint)."""

    name: str
    x_px: float
    y_px: float
    radius_px: float
    field_angle_deg: float
    distortion_percent: float
    extrapolated: bool


@dataclass(frozen=True)
class ClassificationRule:
    """Thresholds of the classification, percent of image height (our rule, documented).

    none_below_percent: |distortion| under this over the whole field -> "none" (about the
    smallest distortion a viewer notices; distortion specs commonly start at 0.1-1 %, common
    practice). sign_change_percent: a mustache needs both signs beyond this.
    """

    none_below_percent: float = 0.1
    sign_change_percent: float = 0.05


@dataclass(frozen=True)
class Classification:
    label: str
    threshold_percent: float
    reason: str


@dataclass(frozen=True)
class Verdict:
    name: str
    value: float
    limit: float
    passed: bool


@dataclass(frozen=True)
class DistortionResult:
    """Everything the distortion analysis found; see module docstring for the method."""

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

    @property
    def passed(self) -> bool | None:
        """True/False when spec limits were given, None otherwise."""
        return None if not self.verdicts else all(v.passed for v in self.verdicts)


# ----------------------------------------------------------------------------------------------
# Model fit
# ----------------------------------------------------------------------------------------------


def choose_terms(ideal_norm: np.ndarray) -> tuple[str, ...]:
    """Free terms the points can support, from their count and the field they cover.

    Our rule (documented, conservative): centre, scale and roll always; aspect and skew when
    the points spread in both x and y (n >= 6); k1 from n >= 8; p1, p2 from n >= 12; k2 from
    n >= 15 and a normalized radius >= 0.15 (about 8.5 deg rectilinear); k3 from n >= 25 and a
    radius >= 0.35 (about 19 deg): below that r^6 is nearly collinear with r^2 and r^4 over
    the field and k3 only trades off against k2.
    """
    p = np.asarray(ideal_norm, dtype=float)
    n = len(p)
    r = np.hypot(p[:, 0], p[:, 1])
    r_max = float(np.nanmax(r)) if n else 0.0
    spread_2d = n >= 6 and r_max > 0 and min(np.nanstd(p[:, 0]), np.nanstd(p[:, 1])) > 0.2 * r_max
    terms = ["cx", "cy", "fx"]
    if n >= 3:
        terms.append("roll")
    if spread_2d:
        terms += ["aspect", "skew"]
    if n >= 8 and r_max > 0:
        terms.append("k1")
    if spread_2d and n >= 12:
        terms += ["p1", "p2"]
    if n >= 15 and r_max >= 0.15:
        terms.append("k2")
    if n >= 25 and r_max >= 0.35:
        terms.append("k3")
    return tuple(t for t in ALL_TERMS if t in terms)


def _values(geom: CameraGeometry) -> dict[str, float]:
    cx, cy = geom.principal_point
    d = geom.distortion
    return {"cx": cx, "cy": cy, "roll": geom.roll_deg, "fx": geom.fx, "aspect": geom.aspect,
            "skew": geom.skew_deg, "k1": d.k1, "k2": d.k2, "p1": d.p1, "p2": d.p2, "k3": d.k3}


def _geometry(base: CameraGeometry, v: Mapping[str, float]) -> CameraGeometry:
    return base.replace(
        cx=v["cx"], cy=v["cy"], roll_deg=v["roll"],
        focal_length_mm=v["fx"] * base.pixel_pitch_um / 1000.0,
        aspect=v["aspect"], skew_deg=v["skew"],
        distortion=BrownConrady(k1=v["k1"], k2=v["k2"], p1=v["p1"], p2=v["p2"], k3=v["k3"]),
        defects=(),
    )


def fit_camera_model(
    measured_xy: np.ndarray,
    directions_cam: np.ndarray,
    nominal: CameraGeometry,
    *,
    sigma_px: np.ndarray | float | None = None,
    terms: Sequence[str] | None = None,
    loss: str = "linear",
    f_scale: float = 1.0,
    start: CameraGeometry | None = None,
) -> tuple[FitModel, np.ndarray]:
    """Least-squares fit of the camera model to measured spots (x, y) for known directions.

    Terms not fitted keep their nominal value. sigma_px: per-point (N, 2) or (N,), or one
    figure; None gives unit weights (uncertainties then rest on the reduced chi-square).
    Returns the model and the weighted residuals (N, 2).
    """
    meas = np.asarray(measured_xy, dtype=float).reshape(-1, 2)
    dirs = np.asarray(directions_cam, dtype=float).reshape(-1, 3)
    if len(meas) != len(dirs):
        raise ValueError(f"{len(meas)} measured points but {len(dirs)} directions; they must pair up")
    sig = _sigma_array(sigma_px, len(meas))
    base = start or nominal
    v0 = _values(base)
    if terms is None:
        terms = choose_terms(ideal_normalized(nominal, dirs))
    unknown = [t for t in terms if t not in ALL_TERMS]
    if unknown:
        raise ValueError(f"unknown fit terms {unknown}; choose from {ALL_TERMS}")
    terms = tuple(t for t in ALL_TERMS if t in terms)
    n_par = len(terms)
    if 2 * len(meas) <= n_par:
        raise ValueError(
            f"{len(meas)} points cannot support {n_par} free terms {terms}; measure more points "
            "or fix terms"
        )

    def resid(x: np.ndarray) -> np.ndarray:
        v = dict(v0)
        v.update(zip(terms, x))
        pred = project(_geometry(base, v), dirs, include_defects=False)
        return ((pred - meas) / sig).ravel()

    x0 = np.array([v0[t] for t in terms])
    # Typical sizes, so the solver's steps are balanced (pixels, degrees, ratio, coefficients).
    typical = {"cx": 1.0, "cy": 1.0, "roll": 0.01, "fx": 1.0, "aspect": 1e-3, "skew": 0.01,
               "k1": 1e-2, "k2": 1e-2, "p1": 1e-4, "p2": 1e-4, "k3": 1e-2}
    res = optimize.least_squares(resid, x0, loss=loss, f_scale=f_scale, method="trf",
                                 x_scale=np.array([typical[t] for t in terms]), xtol=1e-12, ftol=1e-12)
    v = dict(v0)
    v.update(zip(terms, res.x))
    geom = _geometry(base, v)
    r = res.fun
    dof = max(1, r.size - n_par)
    chi2 = float(r @ r) / dof
    try:
        cov = np.linalg.pinv(res.jac.T @ res.jac) * chi2
        sig_par = {t: float(math.sqrt(max(cov[i, i], 0.0))) for i, t in enumerate(terms)}
    except np.linalg.LinAlgError:
        sig_par = {t: float("nan") for t in terms}
    resid_px = (r.reshape(-1, 2) * sig)
    rms = float(np.sqrt(np.mean(np.sum(resid_px ** 2, axis=1))))
    model = FitModel(geometry=geom, fitted_terms=terms, sigmas=sig_par, reduced_chi2=chi2,
                     n_points=len(meas), rms_residual_px=rms)
    return model, r.reshape(-1, 2)


def _sigma_array(sigma_px: np.ndarray | float | None, n: int) -> np.ndarray:
    if sigma_px is None:
        return np.ones((n, 2))
    s = np.asarray(sigma_px, dtype=float)
    if s.ndim == 0:
        s = np.full((n, 2), float(s))
    elif s.ndim == 1:
        s = np.repeat(s[:, None], 2, axis=1)
    s = s.reshape(n, 2).copy()
    bad = ~np.isfinite(s) | (s <= 0)
    if bad.any():
        fill = float(np.nanmedian(np.where(bad, np.nan, s))) if (~bad).any() else 1.0
        s[bad] = fill
    return s


# ----------------------------------------------------------------------------------------------
# Figures of merit
# ----------------------------------------------------------------------------------------------


def radial_distortion_percent(d: BrownConrady, r_norm: np.ndarray) -> np.ndarray:
    """Radial distortion 100 (k1 r^2 + k2 r^4 + k3 r^6) at undistorted normalized radius r."""
    r2 = np.asarray(r_norm, dtype=float) ** 2
    return 100.0 * r2 * (d.k1 + r2 * (d.k2 + r2 * d.k3))


def _theta_of_radius(r: np.ndarray, projection: str) -> np.ndarray:
    """Field angle (rad) of an undistorted normalized radius, inverse of the projection."""
    r = np.asarray(r, dtype=float)
    if projection == "rectilinear":
        return np.arctan(r)
    if projection == "equidistant":
        return r
    if projection == "stereographic":
        return 2.0 * np.arctan(r / 2.0)
    if projection == "equisolid":
        return 2.0 * np.arcsin(np.clip(r / 2.0, -1, 1))
    if projection == "orthographic":
        return np.arcsin(np.clip(r, -1, 1))
    raise ValueError(f"projection {projection!r} unknown")


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


def _field_points(model: FitModel, r_meas_max: float) -> tuple[tuple[FieldPoint, ...], tuple[FieldPoint, ...]]:
    g = model.geometry
    w, h = g.width, g.height
    mx, my = (w - 1) / 2.0, (h - 1) / 2.0
    places = {
        "top_left": (0.0, 0.0), "top_right": (w - 1.0, 0.0),
        "bottom_left": (0.0, h - 1.0), "bottom_right": (w - 1.0, h - 1.0),
        "left": (0.0, my), "right": (w - 1.0, my), "top": (mx, 0.0), "bottom": (mx, h - 1.0),
    }
    pts = np.array(list(places.values()))
    nd = _normalized_from_pixels(g, pts)
    r = _undistorted_radius(g.distortion, np.hypot(nd[:, 0], nd[:, 1]))
    dist = radial_distortion_percent(g.distortion, r)
    theta = np.degrees(_theta_of_radius(r, g.projection))
    out = [FieldPoint(name, float(x), float(y), float(rr * g.fx), float(t), float(dd), bool(rr * g.fx > r_meas_max * 1.02))
           for (name, (x, y)), rr, t, dd in zip(places.items(), r, theta, dist)]
    return tuple(out[:4]), tuple(out[4:])


def _classify(curve: RadialCurve, rule: ClassificationRule) -> Classification:
    d = curve.distortion_percent
    peak = float(d[np.argmax(np.abs(d))])
    t = rule.none_below_percent
    if abs(peak) < t:
        return Classification("none", t, f"|distortion| stays below {t:g} % over the field (largest {peak:+.3f} %)")
    s = rule.sign_change_percent
    if d.max() > s and d.min() < -s:
        sign = np.signbit(d[1:]) != np.signbit(d[:-1])
        k = int(np.argmax(sign)) if sign.any() else 0
        return Classification(
            "mustache", s,
            f"radial curve changes sign at {curve.radius_px[k]:.0f} px ({curve.field_angle_deg[k]:.1f} deg): "
            f"from {d.min():+.3f} % to {d.max():+.3f} %, both beyond +/-{s:g} %")
    label = "barrel" if peak < 0 else "pincushion"
    return Classification(label, t, f"radial distortion reaches {peak:+.3f} % (beyond {t:g} %) with one sign over the field")


_SPEC_KEYS = {
    "max_distortion_percent": "largest |local distortion|, %",
    "max_corner_distortion_percent": "largest |fitted distortion| at a corner, %",
    "max_boresight_offset_px": "|principal point - detector centre|, px",
    "max_skew_deg": "|skew|, deg",
    "max_roll_deg": "|roll|, deg",
    "max_residual_rms_px": "RMS residual after the full fit, px",
    "max_defects": "number of points flagged as local defects",
    "max_efl_error_percent": "|effective focal length - nominal| / nominal, %",
}


def _verdicts(spec: Mapping[str, float] | None, values: Mapping[str, float]) -> tuple[Verdict, ...]:
    if not spec:
        return ()
    unknown = [k for k in spec if k not in _SPEC_KEYS]
    if unknown:
        raise ValueError(f"unknown distortion spec limit(s) {unknown}; known: {sorted(_SPEC_KEYS)}")
    return tuple(Verdict(k, float(values[k]), float(lim), bool(abs(values[k]) <= float(lim)))
                 for k, lim in spec.items())


# ----------------------------------------------------------------------------------------------
# Shared core and the two entry points
# ----------------------------------------------------------------------------------------------


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
) -> DistortionResult:
    n = len(directions)
    have = np.all(np.isfinite(measured), axis=1)
    if have.sum() < 4:
        raise ValueError(f"only {int(have.sum())} of {n} points were measured; at least 4 are needed for a fit")
    m_xy, m_sig, m_dir = measured[have], sigma[have], directions[have]
    sigma_given = np.isfinite(m_sig).all()
    sig_fit = m_sig if sigma_given else None
    if terms is None:
        terms = choose_terms(ideal_normalized(nominal, m_dir))

    # Pass 1: soft-L1 fit, so a local defect does not drag the model (robust loss, f_scale of
    # 3 sigmas; with unit weights 3 x the median centroid-free scale is unknown, so 0.05 px).
    f0 = 3.0 if sig_fit is not None else 0.05
    model, r = fit_camera_model(m_xy, m_dir, nominal, sigma_px=sig_fit, terms=terms, loss=loss, f_scale=f0)
    scale = _robust_scale(r)
    s_px = _sigma_array(sig_fit, len(m_xy))
    outlier = _flag(r, s_px, scale, n_sigma, defect_floor_px)
    keep = ~outlier
    # Pass 2 (always when the loss was robust: its covariance is not the least-squares one):
    # plain least squares without the flagged points; its covariance is the one reported.
    if (loss != "linear" or outlier.any()) and keep.sum() * 2 > len(model.fitted_terms) + 2:
        model, _ = fit_camera_model(m_xy[keep], m_dir[keep], nominal, sigma_px=None if sig_fit is None else sig_fit[keep],
                                    terms=terms, start=model.geometry)
    geom = model.geometry
    fitted_all = project(geom, m_dir, include_defects=False)
    r_all = (m_xy - fitted_all) / s_px
    scale = _robust_scale(r_all[keep])
    defect_m = _flag(r_all, s_px, scale, n_sigma, defect_floor_px)
    res_sig_m = np.hypot(*r_all.T) / scale
    if sig_fit is None:
        s_px = s_px * scale  # unit weights: the robust scale is the per-point sigma in px
        scale = 1.0
    threshold_px = float(max(defect_floor_px, n_sigma * scale * float(np.median(np.hypot(*s_px.T)) / math.sqrt(2))))

    # Per-point table (all points, NaN where not measured).
    nan2 = np.full((n, 2), np.nan)
    ideal_geom = geom.replace(distortion=BrownConrady(), defects=())
    expected_nominal = project(nominal.replace(defects=()), directions, include_defects=False)
    ideal = project(ideal_geom, directions, include_defects=False)
    fitted = project(geom, directions, include_defects=False)
    meas_full = nan2.copy()
    meas_full[have] = m_xy
    sig_full = nan2.copy()
    sig_full[have] = s_px
    error = meas_full - ideal
    error_mrad = np.column_stack([error[:, 0] * 1000.0 / geom.fx, error[:, 1] * 1000.0 / geom.fy])
    diag = math.hypot(geom.width, geom.height)
    err_fov = 100.0 * np.hypot(error[:, 0], error[:, 1]) / diag
    theta = np.degrees(field_angles(directions))
    ideal_n = ideal_normalized(geom, directions)
    r_ideal = np.hypot(ideal_n[:, 0], ideal_n[:, 1])
    meas_n = _normalized_from_pixels(geom, meas_full)
    r_meas = np.hypot(meas_n[:, 0], meas_n[:, 1])
    with np.errstate(divide="ignore", invalid="ignore"):
        dist_pct = np.where(r_ideal > 0, 100.0 * (r_meas - r_ideal) / r_ideal, np.nan)
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
        used_in_fit=used, defect=defect, in_field_stats=in_stats,
    )

    # Radial curve from the centre to the farthest corner, and the named field points.
    r_meas_max = float(np.nanmax(np.where(have, r_ideal_px, np.nan)))
    corners, edges = _field_points(model, r_meas_max)
    r_top = max([c.radius_px for c in corners] + [r_meas_max]) / geom.fx
    rr = np.linspace(0.0, r_top, 256)
    curve = RadialCurve(radius_px=rr * geom.fx, field_angle_deg=np.degrees(_theta_of_radius(rr, geom.projection)),
                        distortion_percent=radial_distortion_percent(geom.distortion, rr),
                        measured_radius_max_px=r_meas_max)
    if in_stats.any():
        k = int(np.nanargmax(np.where(in_stats, np.abs(dist_pct), -np.inf)))
        max_d, max_at, max_label = float(dist_pct[k]), (float(meas_full[k, 0]), float(meas_full[k, 1])), labels[k]
    else:
        max_d, max_at, max_label = float("nan"), (float("nan"), float("nan")), ""
        notes.append("no point far enough from the centre for a percent distortion")
    if any(c.extrapolated for c in corners):
        notes.append("corner distortion extrapolated from the fitted curve beyond the measured field")
    cls = _classify(curve, rule)
    offset = (model.cx - (geom.width - 1) / 2.0, model.cy - (geom.height - 1) / 2.0)
    values = {
        "max_distortion_percent": max_d,
        "max_corner_distortion_percent": max((abs(c.distortion_percent) for c in corners), default=0.0),
        "max_boresight_offset_px": math.hypot(*offset),
        "max_skew_deg": geom.skew_deg,
        "max_roll_deg": geom.roll_deg,
        "max_residual_rms_px": model.rms_residual_px,
        "max_defects": float(defect.sum()),
        "max_efl_error_percent": 100.0 * (geom.focal_length_mm - nominal.focal_length_mm) / nominal.focal_length_mm,
    }
    return DistortionResult(
        mode=mode, model=model, nominal=nominal, points=points, curve=curve, corners=corners, edges=edges,
        max_distortion_percent=max_d, max_distortion_at_px=max_at, max_distortion_label=max_label,
        classification=cls, boresight_offset_px=offset, defect_threshold_px=threshold_px,
        verdicts=_verdicts(spec, values), n_missing=int((~have).sum()), n_extra=n_extra, match=match,
        notes=tuple(notes),
    )


def _robust_scale(r: np.ndarray) -> float:
    """MAD-based sigma of normalized residual components (Rousseeuw & Croux 1993)."""
    v = np.asarray(r, dtype=float).ravel()
    v = v[np.isfinite(v)]
    if v.size == 0:
        return 1.0
    s = 1.4826 * float(np.median(np.abs(v - np.median(v))))
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
    good = [s for s in spots_or_xy if not (s.flags & _UNUSABLE)]
    xy = np.array([[s.x, s.y] for s in good], dtype=float).reshape(-1, 2)
    sig = np.array([[s.sigma_x, s.sigma_y] for s in good], dtype=float).reshape(-1, 2)
    if sigma_px is not None:
        sig = _sigma_or_nan(sigma_px, len(xy))
    return xy, sig


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
    loss: str = "soft_l1",
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
    spots' own sigmas. spec: limits such as {"max_distortion_percent": 2.0}. loss: the first
    pass's scipy loss ("soft_l1" default, robust to defects; "linear" for one plain fit when
    no point is flagged).
    min_radius_fraction: points nearer the centre than this fraction of the measured field are
    left out of the maximum (their percentage is noise over a tiny radius).
    """
    dirs = np.asarray(expected_directions_cam, dtype=float).reshape(-1, 3)
    n = len(dirs)
    labels = tuple(labels) if labels is not None else tuple(f"p{i}" for i in range(n))
    if len(labels) != n:
        raise ValueError(f"{len(labels)} labels for {n} expected points")
    xy, sig = _spot_arrays(spots_or_xy, sigma_px)
    notes: list[str] = []
    measured = np.full((n, 2), np.nan)
    sigma = np.full((n, 2), np.nan)
    match = None
    n_extra = 0
    if assume_matched:
        if len(xy) != n:
            raise ValueError(f"assume_matched needs one measured row per expected point ({n}), got {len(xy)}")
        measured, sigma = xy, sig
    else:
        expected = project(nominal.replace(defects=()), dirs, include_defects=False)
        match = match_points(xy, expected, gate_px=gate_px)
        measured[match.pairs[:, 1]] = xy[match.pairs[:, 0]]
        sigma[match.pairs[:, 1]] = sig[match.pairs[:, 0]]
        n_extra = len(match.unmatched_detected)
        if n_extra:
            notes.append(f"{n_extra} detected spot(s) matched no expected point (hot pixel, reflection?)")
    if np.isnan(sigma).any() and not np.isnan(sigma).all():
        sigma = np.where(np.isnan(sigma), np.nanmedian(sigma), sigma)
    return _analyze("grid", measured, sigma, dirs, nominal, labels, spec, terms, loss, n_sigma, defect_floor_px,
                    rule, min_radius_fraction, n_extra, match, notes)


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
    loss: str = "soft_l1",
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
        sig = np.where(np.isnan(sig), np.nanmedian(sig), sig)
    labels = tuple(labels) if labels is not None else tuple(f"az{az:+.2f}_el{el:+.2f}" for az, el in poses)
    return _analyze("scan", xy, sig, dirs, nominal, labels, spec, terms, loss, n_sigma, defect_floor_px,
                    rule, min_radius_fraction, 0, None, [])
