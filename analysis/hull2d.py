"""Convex hull of points in the plane (numpy only).

Method: Andrew's monotone chain (A. M. Andrew, Inf. Process. Lett. 9:216, 1979): sort the
points by x then y, build the lower and the upper chain keeping only left turns, O(n log n),
after dropping the points strictly inside the polygon of the extreme points (Akl & Toussaint
1978), which cannot be vertices.
Points on an edge between two vertices are not vertices. The hull is degenerate (no area) when
fewer than three distinct points are given or all lie on one line; the caller decides what that
means for it.
"""

from __future__ import annotations

import numpy as np

__all__ = ["convex_hull", "hull_equations"]


def _chain(pts: list[tuple[float, float]]) -> list[int]:
    """Andrew's monotone chain over points sorted by x then y: hull positions, counter-clockwise."""

    def turn(o: int, a: int, b: int) -> float:
        (ox, oy), (ax, ay), (bx, by) = pts[o], pts[a], pts[b]
        return (ax - ox) * (by - oy) - (ay - oy) * (bx - ox)

    lower: list[int] = []
    for i in range(len(pts)):
        while len(lower) >= 2 and turn(lower[-2], lower[-1], i) <= 0:
            lower.pop()
        lower.append(i)
    upper: list[int] = []
    for i in range(len(pts) - 1, -1, -1):
        while len(upper) >= 2 and turn(upper[-2], upper[-1], i) <= 0:
            upper.pop()
        upper.append(i)
    return lower[:-1] + upper[:-1]


def _candidates(p: np.ndarray) -> np.ndarray:
    """Indices of the points that may be hull vertices: those not strictly inside the polygon
    of the extreme points along x, y, x + y and x - y (Akl & Toussaint, Inf. Process. Lett.
    7:219, 1978), so the sequential chain sees only the points near the boundary."""
    ext = np.unique(np.array([f(v) for v in (p[:, 0], p[:, 1], p[:, 0] + p[:, 1], p[:, 0] - p[:, 1])
                              for f in (np.argmin, np.argmax)]))
    e = p[ext]
    o = np.lexsort((e[:, 1], e[:, 0]))
    poly = e[o][_chain([tuple(q) for q in e[o].tolist()])]
    if len(poly) < 3:
        return np.arange(len(p))
    a = poly
    d = np.roll(poly, -1, axis=0) - a
    # Strictly left of every counter-clockwise edge: strictly inside, never a vertex.
    inside = np.all(d[None, :, 0] * (p[:, None, 1] - a[None, :, 1])
                    - d[None, :, 1] * (p[:, None, 0] - a[None, :, 0]) > 0, axis=1)
    return np.nonzero(~inside)[0]


def convex_hull(points: np.ndarray) -> np.ndarray:
    """Indices of the hull vertices of points (N, 2), counter-clockwise (x right, y up),
    starting at the lowest-x (then lowest-y) point; fewer than 3 when the hull has no area."""
    p = np.asarray(points, dtype=float).reshape(-1, 2)
    if len(p) == 0:
        return np.empty(0, dtype=np.int64)
    keep = _candidates(p)
    order = keep[np.lexsort((p[keep, 1], p[keep, 0]))]
    chain = _chain([tuple(q) for q in p[order].tolist()])
    verts = order[np.array(chain, dtype=np.int64)] if chain else np.empty(0, dtype=np.int64)
    if len(verts) < 3:  # all points equal or on one line: the two ends (or the one point)
        uniq = order[[0, -1]] if np.any(p[order[0]] != p[order[-1]]) else order[:1]
        return np.asarray(uniq, dtype=np.int64)
    return verts


def hull_equations(vertices: np.ndarray) -> np.ndarray:
    """Edge lines (M, 3) [a, b, c] of a counter-clockwise hull, (a, b) the outward unit
    normal, so that a x + b y + c <= 0 inside (the convention of Qhull's facet equations)."""
    v = np.asarray(vertices, dtype=float).reshape(-1, 2)
    d = np.roll(v, -1, axis=0) - v
    n = np.column_stack([d[:, 1], -d[:, 0]]) / np.hypot(d[:, 0], d[:, 1])[:, None]
    return np.column_stack([n, -np.einsum("ij,ij->i", n, v)])
