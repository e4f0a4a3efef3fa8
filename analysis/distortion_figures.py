"""Figures of a fitted distortion model over the measured field, each with its uncertainty.

- Local distortion of the model at an undistorted normalized point p: 100 (|D(p)| - |p|) / |p|,
  D the Brown-Conrady map (radial plus the radial part of the tangential terms), the ISO
  17850:2015 percentage (pincushion positive, barrel negative; W. J. Smith, Modern Optical
  Engineering, ch. 5) applied to the model instead of to single noisy points.
- The measured field is the convex hull of the measured points in normalized coordinates
  (analysis.hull2d); a figure outside it is extrapolated, and the distance beyond the hull is stated.
- Uncertainties by the delta method: var f = g^T C g, g the gradient of the figure by the fitted
  terms (central differences), C the fit covariance (GUM, JCGM 100:2008, section 5.1).
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from analysis.distortion_fit import FitModel, _values, geometry_from_values
from analysis.geometry import BrownConrady, CameraGeometry, apply_brown_conrady
from analysis.hull2d import convex_hull, hull_equations

__all__ = ["local_distortion_percent", "local_distortion_percent_coefficients", "local_distortion_percent_models",
           "propagate", "hull_of", "Hull"]


def local_distortion_percent(d: BrownConrady, xy_norm: np.ndarray) -> np.ndarray:
    """100 (|D(p)| - |p|) / |p| at undistorted normalized points p (N, 2); 0 at the centre.

    >>> round(float(local_distortion_percent(BrownConrady(k1=-0.25), np.array([[0.2, 0.0]]))[0]), 6)
    -1.0
    """
    p = np.asarray(xy_norm, dtype=float).reshape(-1, 2)
    r = np.hypot(p[:, 0], p[:, 1])
    q = apply_brown_conrady(p, d)
    rd = np.hypot(q[:, 0], q[:, 1])
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(r > 1e-12, 100.0 * (rd - r) / np.where(r > 1e-12, r, 1.0), 0.0)


def local_distortion_percent_models(models: list[BrownConrady], xy_norm: np.ndarray) -> np.ndarray:
    """local_distortion_percent of many distortion models at the same points: (models, points),
    one vectorised evaluation (the delta method's perturbed models).

    >>> local_distortion_percent_models([BrownConrady(k1=-0.25)], np.array([[0.2, 0.0]])).round(6).tolist()
    [[-1.0]]
    """
    col = lambda name: np.array([getattr(d, name) for d in models])  # noqa: E731
    return local_distortion_percent_coefficients(col("k1"), col("k2"), col("k3"), col("p1"), col("p2"), xy_norm)


def local_distortion_percent_coefficients(k1: np.ndarray, k2: np.ndarray, k3: np.ndarray, p1: np.ndarray,
                                          p2: np.ndarray, xy_norm: np.ndarray) -> np.ndarray:
    """local_distortion_percent for coefficient arrays (G,) of G models: (G, points)."""
    p = np.asarray(xy_norm, dtype=float).reshape(-1, 2)
    k1, k2, k3, p1, p2 = (np.asarray(c, dtype=float)[:, None] for c in (k1, k2, k3, p1, p2))
    x, y = p[None, :, 0], p[None, :, 1]
    r2 = x * x + y * y
    radial = 1.0 + r2 * (k1 + r2 * (k2 + r2 * k3))
    xd = x * radial + 2.0 * p1 * x * y + p2 * (r2 + 2.0 * x * x)  # Brown-Conrady, as apply_brown_conrady
    yd = y * radial + p1 * (r2 + 2.0 * y * y) + 2.0 * p2 * x * y
    r = np.sqrt(r2)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(r > 1e-12, 100.0 * (np.hypot(xd, yd) - r) / np.where(r > 1e-12, r, 1.0), 0.0)


def propagate(model: FitModel, figure: Callable[[CameraGeometry], np.ndarray],
              many: Callable[[dict[str, np.ndarray]], np.ndarray] | None = None) -> np.ndarray:
    """1-sigma of figure(geometry) (a scalar or an array) from the fit covariance (delta method;
    forward differences with steps of 1e-3 sigma, so the curvature error is negligible).
    many: the same figure for many models at once (rows), given as arrays (G,) of the model
    values by term name (cx, cy, roll, fx, aspect, skew, k1, k2, p1, p2, k3; fx in px, roll and
    skew in degrees): the base and every perturbed model in one vectorised call, without
    building a geometry for each."""
    cov = model.covariance
    if cov is None:
        return np.full(np.atleast_1d(np.asarray(figure(model.geometry), dtype=float)).shape, np.nan)
    v0 = _values(model.geometry)
    terms = model.fitted_terms
    steps = [1e-3 * math.sqrt(max(cov[i, i], 0.0)) or 1e-9 * max(1.0, abs(v0[t])) for i, t in enumerate(terms)]
    if many is not None:
        values = {t: np.full(len(terms) + 1, float(v)) for t, v in v0.items()}
        for i, (t, h) in enumerate(zip(terms, steps)):
            values[t][i + 1] += h
        f = np.asarray(many(values), dtype=float).reshape(len(terms) + 1, -1)
    else:
        geoms = [model.geometry]
        for t, h in zip(terms, steps):
            up = dict(v0)
            up[t] += h
            geoms.append(geometry_from_values(model.geometry, up))
        f = np.array([np.atleast_1d(np.asarray(figure(g), dtype=float)) for g in geoms])
    g = (f[1:] - f[0]) / np.array(steps)[:, None]  # (P, M)
    return np.sqrt(np.maximum(np.einsum("pm,pq,qm->m", g, cov, g), 0.0))


class Hull:
    """Convex hull of 2-D points: membership, distance outside, and sample points inside."""

    def __init__(self, points: np.ndarray) -> None:
        pts = np.asarray(points, dtype=float).reshape(-1, 2)
        pts = pts[np.all(np.isfinite(pts), axis=1)]
        self.points = pts
        verts = convex_hull(pts)
        if len(verts) >= 3:
            self.vertices = pts[verts]  # counter-clockwise (Andrew's monotone chain)
            self.equations = hull_equations(self.vertices)  # a x + b y + c <= 0 inside
        else:
            # Fewer than 3 distinct points, or all on one line: no area. Distances are then to
            # the nearest measured point and the samples are the points themselves.
            self.vertices = pts
            self.equations = None

    def distance_outside(self, xy: np.ndarray) -> np.ndarray:
        """Distance (in the points' units) from each point to the hull; 0 inside."""
        p = np.asarray(xy, dtype=float).reshape(-1, 2)
        if self.equations is None:
            return np.min(np.hypot(p[:, None, 0] - self.vertices[None, :, 0],
                                   p[:, None, 1] - self.vertices[None, :, 1]), axis=1)
        inside = np.all(p @ self.equations[:, :2].T + self.equations[:, 2] <= 1e-12, axis=1)
        a = self.vertices
        b = np.roll(a, -1, axis=0)
        ab = b - a
        t = np.clip(np.einsum("nmk,mk->nm", p[:, None, :] - a[None], ab) / np.maximum((ab * ab).sum(1), 1e-30), 0, 1)
        closest = a[None] + t[:, :, None] * ab[None]
        d = np.hypot(*(p[:, None, :] - closest).transpose(2, 0, 1)).min(axis=1)
        return np.where(inside, 0.0, d)

    def samples(self, n_side: int = 40, per_edge: int = 16) -> np.ndarray:
        """Points filling the hull: a lattice inside plus points along every edge."""
        v = self.vertices
        if len(v) < 3 or self.equations is None:
            return v.copy()
        lo, hi = v.min(axis=0), v.max(axis=0)
        gx, gy = np.meshgrid(np.linspace(lo[0], hi[0], n_side), np.linspace(lo[1], hi[1], n_side))
        grid = np.column_stack([gx.ravel(), gy.ravel()])
        grid = grid[np.all(grid @ self.equations[:, :2].T + self.equations[:, 2] <= 1e-12, axis=1)]
        b = np.roll(v, -1, axis=0)
        t = np.linspace(0.0, 1.0, per_edge, endpoint=False)
        edges = (v[:, None, :] + t[None, :, None] * (b - v)[:, None, :]).reshape(-1, 2)
        return np.vstack([grid, edges])


def hull_of(points: np.ndarray) -> Hull:
    return Hull(points)
