"""Field of view directly, in scan mode: the on-axis pinhole stepped out with the stage until
its image leaves the active area, each edge found by bisection on the stage.

Method: the edge is where half of the spot's flux is still on the detector (for a symmetric
spot, its centre is then on the outer pixel edge). The edge pose is bracketed by bisection and
found by a knife-edge fit (an error-function profile, as in the knife-edge method of ISO 11146-1)
over the probes of the transition. The FOV of an axis is the angle between the lines of sight of
its two edge poses (exact for the az-over-el gimbal of `analysis.geometry`). The diagonal is the
angle between the top-left and bottom-right corner poses (`find_corner`: the model's corner pose
corrected by the two edges measured next to it), or, without a model, derived from H and V
through the projection law. Bad pixels (dead, or hot at saturation) are masked in the flux.

Axis order: pixel positions (x, y) = (column, row); poses (az, el) deg.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import ndimage

from analysis.alignment import axis_direction_at
from analysis.centroid import Background, estimate_background
from analysis.fov import FieldOfView, _angle_deg, fov_from_model
from analysis.geometry import CameraGeometry, _radial_map, field_angle_of_radius

__all__ = ["spot_flux", "spot_flux_near", "EdgeProbe", "EdgeSearch", "find_edge",
           "CornerSearch", "find_corner", "line_of_sight_angle_deg", "fov_from_edge_poses",
           "ScanFov", "scan_fov"]


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
              stage_sigma_deg: float = 0.0, level: float = 0.5) -> EdgeSearch:
    """Bisection on the stage for the angle where the flux fraction crosses `level` (one half:
    a symmetric spot centred on an edge; one quarter: centred on a corner).

    `fraction_at(angle)` moves the stage, takes a frame and returns (fraction, sigma) of the
    spot's reference flux still on the detector. `inside_deg` must see more than `level` of the
    spot, `outside_deg` less. Bisection until the bracket is narrower than `tolerance_deg`; the
    edge is then the knife-edge fit over every probe of the transition (`_knife_edge_fit`), or,
    with too few of them, the linear interpolation across the last bracket (sigma: the
    fraction's noise through that slope and the interpolation's worst case, a quarter of the
    bracket as a uniform error). The stage's own sigma is added (GUM, JCGM 100:2008).

    >>> from scipy.special import ndtr
    >>> profile = lambda a: (float(ndtr((12.3 - a) / 0.05)), 0.002)   # an edge at 12.3 deg
    >>> round(find_edge(profile, 0.0, 15.0, tolerance_deg=0.01).angle_deg, 3)
    12.3
    """
    probes: list[EdgeProbe] = []

    def probe(a: float) -> EdgeProbe:
        f, s = fraction_at(a)
        p = EdgeProbe(float(a), float(f), float(s))
        probes.append(p)
        return p

    lo, hi = probe(inside_deg), probe(outside_deg)
    if not lo.fraction > level:
        raise ValueError(f"the spot is not on the detector at the inside angle {inside_deg:g} deg "
                         f"(flux fraction {lo.fraction:.2f}); align first")
    if not hi.fraction < level:
        raise ValueError(f"the spot is still on the detector at {outside_deg:g} deg (flux "
                         f"fraction {hi.fraction:.2f}); widen the search range")
    while abs(hi.angle_deg - lo.angle_deg) > tolerance_deg:
        if len(probes) >= max_probes:
            raise ValueError(f"edge search used {max_probes} probes without narrowing to "
                             f"{tolerance_deg:g} deg; is the flux stable?")
        mid = probe(0.5 * (lo.angle_deg + hi.angle_deg))
        if mid.fraction > level:
            lo = mid
        else:
            hi = mid
    outward = 1.0 if hi.angle_deg > lo.angle_deg else -1.0
    fitted = _knife_edge_fit(probes, outward) if level == 0.5 else None
    if fitted is not None:
        angle, sigma_fit, slope = fitted
        # The fit treats the probes as independent; the fixed-pattern part of each fraction's
        # noise is not (the same pixels at every probe of an edge), so one probe's fraction
        # sigma through the slope is added as a fully correlated term (conservative).
        common = float(np.median([p.sigma for p in probes])) / abs(slope)
        sigma = math.sqrt(sigma_fit ** 2 + common ** 2 + stage_sigma_deg ** 2)
        return EdgeSearch(float(angle), float(sigma), tuple(probes), float(slope))
    slope = (hi.fraction - lo.fraction) / (hi.angle_deg - lo.angle_deg)
    angle = lo.angle_deg + (level - lo.fraction) / slope
    frac_sigma = math.hypot(lo.sigma, hi.sigma) / math.sqrt(2.0)
    width = abs(hi.angle_deg - lo.angle_deg)
    sigma = math.sqrt((frac_sigma / abs(slope)) ** 2 + (width / 4.0) ** 2 / 3.0
                      + stage_sigma_deg ** 2)
    return EdgeSearch(float(angle), float(sigma), tuple(probes), float(slope))


def _knife_edge_fit(probes: Sequence[EdgeProbe], outward: float
                    ) -> tuple[float, float, float] | None:
    """Edge angle, its 1-sigma and the slope there from a fit of the knife-edge profile
    ``f = Phi(outward (a0 - a) / s)`` to the probes in the transition (0.03 < f < 0.97).

    The profile of a Gaussian spot crossing a straight edge is an error function (the knife-edge
    method, e.g. ISO 11146-1 for beam widths); weighted least squares with the probes' sigmas,
    the covariance scaled by the reduced chi-square when above 1 (common practice). Using every
    probe of the transition, not only the last bracket, keeps the noise of two points from
    deciding the answer. None when too few probes are in the transition.
    """
    from scipy import optimize, special

    near = [p for p in probes if 0.03 < p.fraction < 0.97 and p.sigma > 0]
    if len(near) < 4 or len({round(p.angle_deg, 9) for p in near}) < 3:
        return None
    a = np.array([p.angle_deg for p in near])
    f = np.array([p.fraction for p in near])
    s = np.array([p.sigma for p in near])
    centre = float(a[np.argmin(np.abs(f - 0.5))])
    width0 = max(float(np.ptp(a)) / 2.0, 1e-6)

    def model(x: np.ndarray, a0: float, w: float) -> np.ndarray:
        return special.ndtr(outward * (a0 - x) / w)

    try:
        popt, pcov = optimize.curve_fit(model, a, f, p0=(centre, width0), sigma=s,
                                        absolute_sigma=True, bounds=([-np.inf, 1e-9],
                                                                     [np.inf, np.inf]))
    except (RuntimeError, ValueError):
        return None
    dof = len(a) - 2
    chi2 = float(np.sum(((f - model(a, *popt)) / s) ** 2)) / dof if dof > 0 else 1.0
    var = float(pcov[0, 0]) * max(1.0, chi2)
    if not (np.isfinite(var) and var >= 0 and a.min() - width0 <= popt[0] <= a.max() + width0):
        return None
    slope = -outward / (math.sqrt(2.0 * math.pi) * float(popt[1]))
    return float(popt[0]), math.sqrt(var), slope


@dataclass(frozen=True)
class CornerSearch:
    """The pose (az, el) deg at which the spot's centre sits on a corner of the active area, its
    1-sigma per axis, and the edge searches it came from."""

    pose_deg: tuple[float, float]
    sigma_deg: tuple[float, float]
    searches: tuple[EdgeSearch, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {"pose_deg": list(self.pose_deg), "sigma_deg": list(self.sigma_deg),
                "searches": [s.to_dict() for s in self.searches]}


def _edge_with_margin(at: Callable[[float], tuple[float, float]], edge: float, sign: float,
                      margin: float, tolerance_deg: float, stage_sigma_deg: float) -> EdgeSearch:
    """`find_edge` bracketing ``edge -/+ margin``, the bracket doubled once if it misses."""
    try:
        return find_edge(at, edge - sign * margin, edge + sign * margin,
                         tolerance_deg=tolerance_deg, stage_sigma_deg=stage_sigma_deg)
    except ValueError:
        return find_edge(at, edge - 2 * sign * margin, edge + 2 * sign * margin,
                         tolerance_deg=tolerance_deg, stage_sigma_deg=stage_sigma_deg)


PoseOf = Callable[[tuple[float, float]], tuple[float, float]]


def find_corner(fraction_at_pose: Callable[[tuple[float, float]], tuple[float, float]],
                corner_px: tuple[float, float], pose_of: PoseOf, *, px_deg: float,
                tolerance_deg: float, stage_sigma_deg: float = 0.0,
                inward_px: tuple[float, float] = (3.0, 6.0), margin_px: float = 6.0
                ) -> CornerSearch:
    """The stage pose that puts the spot's centre on the corner `corner_px` of the active area
    (for example (-0.5, -0.5), the outer corner of the top-left pixel).

    `pose_of(pixel)` is the pose at which the UUT's model expects the spot at that pixel (through
    `analysis.alignment.aligned_pose` from the spot seen at the centre pose). The model's corner
    pose is corrected by what the model gets wrong near that corner, measured on the two edges
    that meet there: the azimuth edge is bisected (half flux) on two rows `inward_px` pixels
    inside the corner, where the other edge takes none of the flux (3 px: > 3 spot sigmas), and
    compared with the model's pose for those edge points; the elevation edge likewise on two
    columns. The model's error changes along an edge (distortion grows toward the corner), so
    each offset is extrapolated linearly from its two samples to the corner. Sigma per axis:
    the two searches' sigmas through that extrapolation (GUM, JCGM 100:2008).
    """
    cx, cy = float(corner_px[0]), float(corner_px[1])
    inward_x = 1.0 if cx < 0 else -1.0   # toward the detector's inside
    inward_y = 1.0 if cy < 0 else -1.0
    model_corner = pose_of((cx, cy))
    inside = pose_of((cx + inward_x * 10.0, cy + inward_y * 10.0))
    sign_az = 1.0 if model_corner[0] > inside[0] else -1.0   # outward along azimuth
    sign_el = 1.0 if model_corner[1] > inside[1] else -1.0
    margin = margin_px * px_deg
    n1, n2 = inward_px
    w1, w2 = n2 / (n2 - n1), -n1 / (n2 - n1)     # linear extrapolation of two samples to 0
    searches: list[EdgeSearch] = []
    offsets, sigmas = [], []
    for axis in ("az", "el"):
        samples = []
        for n in (n1, n2):
            if axis == "az":
                model = pose_of((cx, cy + inward_y * n))    # on a row n pixels inside
                found = _edge_with_margin(lambda a, e=model[1]: fraction_at_pose((a, e)),
                                          model[0], sign_az, margin, tolerance_deg,
                                          stage_sigma_deg)
                samples.append((found.angle_deg - model[0], found.sigma_deg))
            else:
                model = pose_of((cx + inward_x * n, cy))    # on a column n pixels inside
                found = _edge_with_margin(lambda e, a=model[0]: fraction_at_pose((a, e)),
                                          model[1], sign_el, margin, tolerance_deg,
                                          stage_sigma_deg)
                samples.append((found.angle_deg - model[1], found.sigma_deg))
            searches.append(found)
        offsets.append(w1 * samples[0][0] + w2 * samples[1][0])
        sigmas.append(math.hypot(w1 * samples[0][1], w2 * samples[1][1]))
    pose = (model_corner[0] + offsets[0], model_corner[1] + offsets[1])
    return CornerSearch((float(pose[0]), float(pose[1])), (sigmas[0], sigmas[1]),
                        tuple(searches))


def line_of_sight_angle_deg(pose_a: Sequence[float], pose_b: Sequence[float]) -> float:
    """Angle (deg) between the collimator axis as seen by the UUT at two stage poses (exact for
    the az-over-el gimbal: the angle between ``R_a^T e_z`` and ``R_b^T e_z``).

    >>> round(line_of_sight_angle_deg((0.0, 0.0), (10.0, 0.0)), 9)
    10.0
    """
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
    return 2.0 * math.degrees(float(field_angle_of_radius(np.array([rd]), projection)[0]))


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
    corners: Mapping[str, CornerSearch] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {"fov": self.fov.to_dict(), "centre_pose_deg": list(self.centre_pose_deg),
                "edges": {k: v.to_dict() for k, v in self.edges.items()},
                "corners": {k: v.to_dict() for k, v in self.corners.items()}}


def scan_fov(fraction_at_pose: Callable[[tuple[float, float]], tuple[float, float]],
             centre_pose_deg: Sequence[float], nominal: CameraGeometry, *,
             tolerance_deg: float = 0.02, stage_sigma_deg: float = 0.0,
             reference_rel_sigma: float = 0.0,
             limits_deg: Sequence[tuple[float, float]] | None = None,
             ifov: tuple[float, float] = (float("nan"), float("nan")),
             pose_of: PoseOf | None = None) -> ScanFov:
    """FOV in scan mode: from the aligned pose, step the pinhole out along azimuth (elevation
    held) and along elevation (azimuth held), each way, bisecting for the edge (`find_edge`).
    With `pose_of` (the model's pose for a pixel, see `find_corner`) the diagonal is measured
    too: the top-left and bottom-right corner poses and the angle between their lines of sight;
    without, it is derived from H and V through the projection law.

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
    if pose_of is None:
        return ScanFov(fov, edges, (az0, el0))
    px_deg = math.degrees(nominal.ifov_mrad / 1000.0)
    w, h = nominal.width - 0.5, nominal.height - 0.5
    found = {name: find_corner(fraction_at_pose, px, pose_of, px_deg=px_deg,
                               tolerance_deg=tolerance_deg, stage_sigma_deg=stage_sigma_deg)
             for name, px in (("top_left", (-0.5, -0.5)), ("bottom_right", (w, h)))}
    d, sd = _diagonal_from_corners(found["top_left"], found["bottom_right"], reference_rel_sigma)
    fov = FieldOfView(fov.h_deg, fov.v_deg, d, fov.sigma_h_deg, fov.sigma_v_deg, sd,
                      fov.ifov_mrad, fov.sigma_ifov_mrad, "scan",
                      ("diagonal between the top-left and bottom-right corner poses",))
    return ScanFov(fov, edges, (az0, el0), found)


def _diagonal_from_corners(a: CornerSearch, b: CornerSearch, reference_rel_sigma: float
                           ) -> tuple[float, float]:
    """Angle between the corners' lines of sight and its sigma: the four corner angles' sigmas
    through numerical partial derivatives, plus the reference flux's (it moves both corners
    outward or inward together: linear over the two, as for the edges)."""
    base = line_of_sight_angle_deg(a.pose_deg, b.pose_deg)
    var = 0.0
    eps = 1e-4
    for which in (0, 1):
        for k in (0, 1):
            pa, pb = list(a.pose_deg), list(b.pose_deg)
            (pa if which == 0 else pb)[k] += eps
            grad = (line_of_sight_angle_deg(pa, pb) - base) / eps
            var += (grad * (a if which == 0 else b).sigma_deg[k]) ** 2
    # Each corner moves by ~0.5 sigma_ref / slope on each axis, both corners outward together.
    slopes = [abs(s.slope_per_deg) for s in (*a.searches, *b.searches)]
    shift = sum(0.5 * reference_rel_sigma / s for s in slopes if s > 0) / math.sqrt(2.0)
    return base, math.sqrt(var + shift ** 2)
