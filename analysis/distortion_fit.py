"""Least-squares fit of the camera model to measured spots, with the terms the data support.

The model is analysis.geometry's forward model: principal point cx, cy, roll, fx, aspect fy/fx,
skew, Brown-Conrady radial k1, k2, k3 and tangential p1, p2 (D. C. Brown, Photogramm. Eng.
32:444, 1966; OpenCV calib3d convention and order). Positions are (x, y) = (column, row) px.

Method
------
- Start from a linear least-squares solve (affine camera plus a k1-like r^2 term), so the
  nonlinear solver begins next to the answer whatever the detector or pixel size.
- Levenberg-Marquardt with the analytic Jacobian of the forward model and Marquardt's diagonal
  scaling (so pixels, degrees and coefficients need no hand-set scales), steps projected into
  bounds where a parameter has a
  physical range (aspect, skew, roll, focal length, principal point on the detector). A result
  at a bound is refused: the data did not decide it.
- Terms chosen by the data: k1 is always fitted; p1+p2, k2 and k3 are added one at a time
  (forward selection) while the F-test on the residual sums of squares of the nested fits is
  significant at alpha = 0.05 for k2, k3 and 0.001 for p1+p2 (the extra-sum-of-squares F-test for nested least-squares
  models; e.g. Draper & Smith, Applied Regression Analysis, ch. 6; Bates & Watts, Nonlinear
  Regression Analysis, ch. 3). Each decision is stated in FitModel.term_choice.
- Covariance: (J^T W J)^-1 times the reduced chi-square (standard nonlinear least-squares
  practice, e.g. Press et al., Numerical Recipes, ch. 15).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from analysis.fdist import f_survival
from analysis.geometry import BrownConrady, CameraGeometry, ideal_normalized

__all__ = ["ALL_TERMS", "DistortionRefused", "FitModel", "choose_terms", "fit_camera_model",
           "select_terms", "F_TEST_ALPHA"]

ALL_TERMS = ("cx", "cy", "roll", "fx", "aspect", "skew", "k1", "k2", "p1", "p2", "k3")
# Radial terms at 5 % (common practice): a stricter level leaves a real small k2 out and biases
# k1 beyond its own sigma (seen with the demo camera's k2 = 0.02 on a 12 deg field). The
# decentring pair at 0.1 %: fitted on noise it shows as a spurious angular peak of the maximum
# distortion (seen on distortion-free cameras at 5 %), and real decentring of a made lens
# stands far above that (the demo camera's p1 = 2e-4: p ~ 1e-22).
F_TEST_ALPHA = 0.05
F_TEST_ALPHA_DECENTRING = 0.001
# Optional terms, each group added as a whole (p1 and p2 describe one decentring).
_OPTIONAL = (("p1", "p2"), ("k2",), ("k3",))


class DistortionRefused(ValueError):
    """The data cannot support a distortion result; `cause` says why and what to do."""

    def __init__(self, cause: str) -> None:
        super().__init__(f"distortion analysis refused: {cause}")
        self.cause = cause


@dataclass(frozen=True)
class FitModel:
    """Fitted camera model with 1-sigma uncertainties; distortion in OpenCV's convention.

    covariance: of the fitted terms, in the order of fitted_terms (roll and skew in degrees).
    term_choice: one sentence per optional term group, saying whether it was fitted and why.
    """

    geometry: CameraGeometry
    fitted_terms: tuple[str, ...]
    sigmas: Mapping[str, float]
    reduced_chi2: float
    n_points: int
    rms_residual_px: float
    covariance: np.ndarray | None = None
    term_choice: tuple[str, ...] = field(default_factory=tuple)
    at_bound: tuple[str, ...] = field(default_factory=tuple)

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


def choose_terms(ideal_norm: np.ndarray) -> tuple[str, ...]:
    """Terms the points could support at most, from their count and the field they cover.

    Our rule (documented, conservative): centre, scale and roll always; aspect and skew when
    the points spread in both x and y (n >= 6); k1 from n >= 8; p1, p2 from n >= 12; k2 from
    n >= 15 and a normalized radius >= 0.15 (about 8.5 deg rectilinear); k3 from n >= 25 and a
    radius >= 0.35 (about 19 deg): below that r^6 is nearly collinear with r^2 and r^4 over
    the field. Which of the optional ones are fitted is then decided by the data (select_terms).
    """
    p = np.asarray(ideal_norm, dtype=float)
    n = len(p)
    r = np.hypot(p[:, 0], p[:, 1])
    if n and np.isnan(p).any():  # directions outside the projection: left out
        r_max = float(np.nanmax(r))
        spread = min(np.nanstd(p[:, 0]), np.nanstd(p[:, 1]))
    else:
        r_max = float(r.max()) if n else 0.0
        spread = float(p.std(axis=0).min()) if n else 0.0
    spread_2d = n >= 6 and r_max > 0 and spread > 0.2 * r_max
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


def geometry_from_values(base: CameraGeometry, v: Mapping[str, float]) -> CameraGeometry:
    """base with the model values v (fx in px, roll and skew in degrees)."""
    return base.replace(
        cx=v["cx"], cy=v["cy"], roll_deg=v["roll"],
        focal_length_mm=v["fx"] * base.pixel_pitch_um / 1000.0,
        aspect=v["aspect"], skew_deg=v["skew"],
        distortion=BrownConrady(k1=v["k1"], k2=v["k2"], p1=v["p1"], p2=v["p2"], k3=v["k3"]),
        defects=(),
    )


_DEG = math.pi / 180.0


def model_and_jacobian(v: Mapping[str, float], xn0: np.ndarray, yn0: np.ndarray,
                       terms: Sequence[str] = ()) -> tuple[np.ndarray, np.ndarray]:
    """Pixels (N, 2) of the model at pre-roll normalized points, and d(pixels)/d(terms) (N, 2, P).

    The analytic derivatives of analysis.geometry.project (roll, Brown-Conrady, camera matrix).
    """
    c, s = math.cos(v["roll"] * _DEG), math.sin(v["roll"] * _DEG)
    x = c * xn0 + s * yn0
    y = -s * xn0 + c * yn0
    k1, k2, k3, p1, p2 = v["k1"], v["k2"], v["k3"], v["p1"], v["p2"]
    r2 = x * x + y * y
    radial = 1.0 + r2 * (k1 + r2 * (k2 + r2 * k3))
    xy = x * y
    xd = x * radial + 2.0 * p1 * xy + p2 * (r2 + 2.0 * x * x)
    yd = y * radial + p1 * (r2 + 2.0 * y * y) + 2.0 * p2 * xy
    t = math.tan(v["skew"] * _DEG)
    fx, a = v["fx"], v["aspect"]
    n = len(xn0)
    pred = np.empty((n, 2))
    pred[:, 0] = fx * (xd + t * yd) + v["cx"]
    pred[:, 1] = fx * a * yd + v["cy"]
    J = np.zeros((n, 2, len(terms)))
    if not terms:
        return pred, J
    fa = fx * a

    def through_camera(i: int, dxd: np.ndarray, dyd: np.ndarray) -> None:
        """Column i from the derivatives of the distorted normalized point."""
        J[:, 0, i] = fx * (dxd + t * dyd)
        J[:, 1, i] = fa * dyd

    for i, term in enumerate(terms):
        if term == "cx":
            J[:, 0, i] = 1.0
        elif term == "cy":
            J[:, 1, i] = 1.0
        elif term == "fx":
            J[:, 0, i] = xd + t * yd
            J[:, 1, i] = a * yd
        elif term == "aspect":
            J[:, 1, i] = fx * yd
        elif term == "skew":
            J[:, 0, i] = fx * (1.0 + t * t) * _DEG * yd
        elif term == "k1":
            through_camera(i, x * r2, y * r2)
        elif term == "k2":
            r4 = r2 * r2
            through_camera(i, x * r4, y * r4)
        elif term == "k3":
            r6 = r2 * r2 * r2
            through_camera(i, x * r6, y * r6)
        elif term == "p1":
            through_camera(i, 2.0 * xy, r2 + 2.0 * y * y)
        elif term == "p2":
            through_camera(i, r2 + 2.0 * x * x, 2.0 * xy)
        elif term == "roll":
            dp = k1 + r2 * (2.0 * k2 + 3.0 * k3 * r2)
            dxx = radial + 2.0 * x * x * dp + 2.0 * p1 * y + 6.0 * p2 * x
            dxy = 2.0 * xy * dp + 2.0 * p1 * x + 2.0 * p2 * y
            dyy = radial + 2.0 * y * y * dp + 6.0 * p1 * y + 2.0 * p2 * x
            # dx/droll = y, dy/droll = -x (radians).
            through_camera(i, (dxx * y - dxy * x) * _DEG, (dxy * y - dyy * x) * _DEG)
        else:
            raise ValueError(f"unknown fit term {term!r}; choose from {ALL_TERMS}")
    return pred, J


def _bounds(term: str, nominal: CameraGeometry) -> tuple[float, float]:
    """Physical range of a term (documented, generous): outside it the UUT is not the nominal
    camera any more, and a fit that ends on one of these edges is refused."""
    w, h = nominal.width, nominal.height
    return {
        "cx": (-0.5 * w, 1.5 * w), "cy": (-0.5 * h, 1.5 * h),
        "roll": (-45.0, 45.0), "fx": (0.5 * nominal.fx, 2.0 * nominal.fx),
        "aspect": (0.5, 2.0), "skew": (-5.0, 5.0),
    }.get(term, (-np.inf, np.inf))


def _linear_start(xn0: np.ndarray, yn0: np.ndarray, meas: np.ndarray,
                  v0: dict[str, float]) -> dict[str, float]:
    """Camera matrix, roll and k1 from one linear solve of u, v on (1, x, y, x r^2 | y r^2)."""
    n = len(xn0)
    if n < 6:
        return dict(v0)
    r2 = xn0 * xn0 + yn0 * yn0
    one = np.ones(n)
    Au = np.column_stack([one, xn0, yn0, xn0 * r2])
    Av = np.column_stack([one, xn0, yn0, yn0 * r2])
    try:
        au = np.linalg.solve(Au.T @ Au, Au.T @ meas[:, 0])
        av = np.linalg.solve(Av.T @ Av, Av.T @ meas[:, 1])
    except np.linalg.LinAlgError:
        return dict(v0)
    fy = math.hypot(av[1], av[2])
    roll = math.atan2(-av[1], av[2])
    c, s = math.cos(roll), math.sin(roll)
    fx = c * au[1] + s * au[2]
    if not (fx > 0 and fy > 0):
        return dict(v0)
    t = (-s * au[1] + c * au[2]) / fx
    v = dict(v0)
    v.update(cx=float(au[0]), cy=float(av[0]), fx=float(fx), aspect=float(fy / fx),
             roll=math.degrees(roll), skew=math.degrees(math.atan(t)),
             k1=float(0.5 * (au[3] / fx + av[3] / fy)))
    return v


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


def _pre_roll(nominal: CameraGeometry, dirs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    p = ideal_normalized(nominal.replace(roll_deg=0.0, defects=()), dirs)
    return p[:, 0], p[:, 1]


def _levenberg_marquardt(fun, x0: np.ndarray, lo: np.ndarray, hi: np.ndarray, loss: str = "linear",
                         f_scale: float = 1.0, max_iter: int = 100) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Levenberg-Marquardt with Marquardt's diagonal scaling (scale-free in the parameters) and
    steps projected into the bounds (Levenberg 1944, Marquardt 1963; Nocedal & Wright ch. 10).

    fun(x, jac) returns the residuals and, when jac, their Jacobian. loss "soft_l1" (or any
    other robust name) is solved by iteratively reweighted least squares with the soft-L1
    weights 1 / sqrt(1 + (r / f_scale)^2) (common practice). Converged when a step lowers the
    cost, or would lower it on the linearised model, by less than 1e-6 of the reduced
    chi-square. Returns the solution with its residuals and Jacobian (as fun gives them there).
    """
    x = x0.copy()

    def weights(r: np.ndarray) -> np.ndarray:
        if loss == "linear":
            return np.ones_like(r)
        return 1.0 / np.sqrt(np.sqrt(1.0 + (r / f_scale) ** 2))  # sqrt of the IRLS weight

    r, J = fun(x, True)
    w = weights(r)
    cost = float(((r * w) ** 2).sum())
    lam = 1e-4
    for _ in range(max_iter):
        Jw = J * w[:, None]
        A = Jw.T @ Jw
        g = Jw.T @ (r * w)
        d = np.maximum(np.diag(A), 1e-300)
        try:
            step = np.linalg.solve(A + lam * np.diag(d), -g)
        except np.linalg.LinAlgError:
            lam *= 10.0
            continue
        # The step's decrease of the cost on the linearised model: when even that is below the
        # convergence level (see below), the point is already the minimum and the step is not
        # worth a model evaluation (saves the confirming evaluation of every fit). Only while
        # the damping is light: a heavily damped step understates what is left to gain.
        if lam <= 1e-4:
            predicted = -float(2.0 * (g @ step) + step @ (A @ step))
            if predicted < 1e-6 * max(cost / max(1, r.size - x.size), 1e-300):
                break
        xt = np.clip(x + step, lo, hi)
        rt, Jt = fun(xt, True)
        ct = float(((rt * w) ** 2).sum())
        if ct <= cost:
            moved = np.abs(xt - x) * np.sqrt(d)  # step in units of its own effect on the residuals
            x, r, J = xt, rt, Jt
            drop = cost - ct
            w = weights(r)
            cost = float(((r * w) ** 2).sum())
            lam = max(lam * 0.2, 1e-12)
            # Converged when the cost drops by less than 1e-6 of a chi-square unit (scaled by the
            # reduced chi-square): the parameters then move by ~1e-3 of their sigmas or less.
            scale = max(cost / max(1, r.size - x.size), 1e-300)
            if drop < 1e-6 * scale or float(moved.max()) < 1e-6:
                break
        else:
            if ct - cost <= 1e-9 * cost:
                break  # no step lowers the cost beyond rounding: at the minimum
            lam *= 10.0
            if lam > 1e12:
                break
    return x, r, J


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
    term_choice: Sequence[str] = (),
) -> tuple[FitModel, np.ndarray]:
    """Least-squares fit of the camera model to measured spots (x, y) for known directions.

    Terms not fitted keep their value in `start` (default: the linear-solve start for the
    camera matrix, nominal distortion). sigma_px: per-point (N, 2) or (N,), or one figure;
    None gives unit weights (uncertainties then rest on the reduced chi-square). terms: None
    fits every term choose_terms allows (no selection; see select_terms for that).
    Returns the model and the weighted residuals (N, 2).
    """
    meas = np.asarray(measured_xy, dtype=float).reshape(-1, 2)
    dirs = np.asarray(directions_cam, dtype=float).reshape(-1, 3)
    if len(meas) != len(dirs):
        raise ValueError(f"{len(meas)} measured points but {len(dirs)} directions; they must pair up")
    sig = _sigma_array(sigma_px, len(meas))
    xn0, yn0 = _pre_roll(nominal, dirs)
    if terms is None:
        terms = choose_terms(ideal_normalized(nominal, dirs))
    unknown = [t for t in terms if t not in ALL_TERMS]
    if unknown:
        raise ValueError(f"unknown fit terms {unknown}; choose from {ALL_TERMS}")
    terms = tuple(t for t in ALL_TERMS if t in terms)
    n_par = len(terms)
    if 2 * len(meas) <= n_par:
        raise DistortionRefused(
            f"{len(meas)} points cannot support {n_par} free terms {terms}; measure more points "
            "or fix terms")
    if start is not None:
        v0 = _values(start)
    else:
        v0 = _linear_start(xn0, yn0, meas, _values(nominal))
        for t in ALL_TERMS:  # terms held fixed keep the nominal value
            if t not in terms:
                v0[t] = _values(nominal)[t]
    lo = np.array([_bounds(t, nominal)[0] for t in terms])
    hi = np.array([_bounds(t, nominal)[1] for t in terms])
    x0 = np.array([v0[t] for t in terms], dtype=float)
    span = np.where(np.isfinite(hi - lo), hi - lo, 1.0)
    x0 = np.clip(x0, lo + 1e-6 * span, hi - 1e-6 * span)
    w = 1.0 / sig

    def values(x: np.ndarray) -> dict[str, float]:
        v = dict(v0)
        v.update(zip(terms, x.tolist()))
        return v

    def fun(x: np.ndarray, want_jac: bool) -> tuple[np.ndarray, np.ndarray | None]:
        pred, J = model_and_jacobian(values(x), xn0, yn0, terms if want_jac else ())
        r = ((pred - meas) * w).ravel()
        return r, (J * w[:, :, None]).reshape(-1, n_par) if want_jac else None

    x_fit, r, J = _levenberg_marquardt(fun, x0, lo, hi, loss, f_scale)
    v = values(x_fit)
    geom = geometry_from_values(nominal, v)
    dof = max(1, r.size - n_par)
    chi2 = float(r @ r) / dof
    try:
        cov = np.linalg.inv(J.T @ J) * chi2
        sig_par = {t: float(math.sqrt(max(cov[i, i], 0.0))) for i, t in enumerate(terms)}
    except np.linalg.LinAlgError:
        cov = None
        sig_par = {t: float("nan") for t in terms}
    near = 1e-4 * span
    at_bound = tuple(t for t, xv, a, b in zip(terms, x_fit, lo, hi)
                     if (np.isfinite(a) and xv - a < near[terms.index(t)])
                     or (np.isfinite(b) and b - xv < near[terms.index(t)]))
    resid_px = r.reshape(-1, 2) * sig
    rms = float(np.sqrt(np.mean(np.sum(resid_px ** 2, axis=1))))
    model = FitModel(geometry=geom, fitted_terms=terms, sigmas=sig_par, reduced_chi2=chi2,
                     n_points=len(meas), rms_residual_px=rms, covariance=cov,
                     term_choice=tuple(term_choice), at_bound=at_bound)
    return model, r.reshape(-1, 2)


def _rss_with(r: np.ndarray, A_all: np.ndarray, columns: Sequence[int]) -> tuple[float, np.ndarray]:
    """Residual sum of squares after adding terms, by one Gauss-Newton step from the smaller
    model's optimum (exact for terms that enter linearly, as the distortion terms nearly do).
    r, A_all: weighted residuals and Jacobian there (every candidate term, one evaluation);
    columns: those of the terms of the larger model. Returns the RSS and the step."""
    A = A_all[:, columns]
    step = np.linalg.solve(A.T @ A, -(A.T @ r))
    r1 = r + A @ step
    return float(r1 @ r1), step


def _level(group: tuple[str, ...], alpha: float) -> float:
    """Significance level of a term group: the decentring pair needs strong evidence."""
    return min(alpha, F_TEST_ALPHA_DECENTRING) if group == ("p1", "p2") else alpha


def select_terms(
    measured_xy: np.ndarray,
    directions_cam: np.ndarray,
    nominal: CameraGeometry,
    *,
    sigma_px: np.ndarray | float | None = None,
    allowed: Sequence[str] | None = None,
    alpha: float = F_TEST_ALPHA,
) -> tuple[FitModel, np.ndarray]:
    """Fit the base terms plus the optional ones (p1+p2, k2, k3) the data support.

    Forward selection: each round adds the group with the smallest F-test p-value,
    F = ((RSS0 - RSS1) / dp) / (RSS1 / dof1), while it is below its level (alpha; 0.001 for p1+p2) (the RSS of each nested
    model by one Gauss-Newton step from the base optimum; the chosen model is then fitted in
    full). The returned model's term_choice says, per group, F, its degrees of freedom and
    p-value.
    """
    meas = np.asarray(measured_xy, dtype=float).reshape(-1, 2)
    dirs = np.asarray(directions_cam, dtype=float).reshape(-1, 3)
    if allowed is None:
        allowed = choose_terms(ideal_normalized(nominal, dirs))
    allowed = tuple(allowed)
    optional = [g for g in _OPTIONAL if all(t in allowed for t in g)]
    base = tuple(t for t in allowed if not any(t in g for g in _OPTIONAL))
    model, r = fit_camera_model(meas, dirs, nominal, sigma_px=sigma_px, terms=base)
    w = 1.0 / _sigma_array(sigma_px, len(meas))
    xn0, yn0 = _pre_roll(nominal, dirs)
    rss = float(np.sum(r * r))
    n_obs = r.size
    notes: list[str] = []
    chosen = list(base)
    # Every nested model is judged at the base optimum: one Jacobian with all candidate terms.
    candidates = tuple(t for t in ALL_TERMS if t in base or any(t in g for g in optional))
    pred, J = model_and_jacobian(_values(model.geometry), xn0, yn0, candidates)
    r_base = ((pred - meas) * w).ravel()
    A_all = (J * w[:, :, None]).reshape(-1, len(candidates))
    last: dict[tuple[str, ...], tuple[float, float, int]] = {}
    while optional:
        trials = []
        for g in optional:
            terms = tuple(t for t in ALL_TERMS if t in chosen or t in g)
            rss1, step = _rss_with(r_base, A_all, [candidates.index(t) for t in terms])
            dof1 = n_obs - len(terms)
            if dof1 <= 0 or rss1 <= 0:
                continue
            f = max(0.0, (rss - rss1) / len(g)) / (rss1 / dof1)
            p = f_survival(len(g), dof1, f)
            level = _level(g, alpha)
            if p < level:
                trials.append((p / level, p, f, g, dof1, rss1, terms, step))
            last[g] = (p, f, dof1)
        if not trials:
            break
        _, p, f, g, dof1, rss1, terms, step = min(trials, key=lambda item: item[0])
        warm = (terms, step)
        notes.append(f"{', '.join(g)}: fitted (F = {f:.3g} on ({len(g)}, {dof1}) dof, p = {p:.2g} < {_level(g, alpha):g})")
        chosen += list(g)
        optional.remove(g)
        rss = rss1  # the next round compares against this model (its RSS by the same step)
    if len(chosen) > len(base):
        # Start the full fit where the Gauss-Newton step of the chosen model landed: next to
        # its optimum, so the solver needs a step or two instead of starting from the base.
        v = _values(model.geometry)
        for t, dv in zip(*warm):
            v[t] += float(dv)
        inside = all(_bounds(t, nominal)[0] < v[t] < _bounds(t, nominal)[1] for t in chosen)
        start = geometry_from_values(model.geometry, v) if inside else model.geometry  # else from the base
        model, r = fit_camera_model(meas, dirs, nominal, sigma_px=sigma_px, terms=chosen, start=start)
    for g in optional:
        if g in last:
            p, f, dof1 = last[g]
            notes.append(f"{', '.join(g)}: held at the nominal value (F = {f:.3g} on ({len(g)}, {dof1}) "
                         f"dof, p = {p:.2g} >= {_level(g, alpha):g}: not supported by the data)")
    for g in _OPTIONAL:
        if g not in optional and not all(t in chosen for t in g):
            notes.append(f"{', '.join(g)}: held at the nominal value (too few points or too narrow a "
                         "field to fit it)")
    model = FitModel(**{**model.__dict__, "term_choice": tuple(notes)})
    return model, r
