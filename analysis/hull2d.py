"""Convex hull of points in the plane (numpy only).

Method: Andrew's monotone chain (A. M. Andrew, Inf. Process. Lett. 9:216, 1979): sort the
points by x then y, build the lower and the upper chain keeping only left turns, O(n log n).
Points on an edge between two vertices are not vertices. The hull is degenerate (no area) when
fewer than three distinct points are given or all lie on one line; the caller decides what that
means for it.
"""

from __future__ import annotations

import numpy as np

__all__ = ["convex_hull", "hull_equations"]


def _cross(o: np.ndarray, a: np.ndarray, b: np.ndarray) -> float:
    return float((a[0] - o[0]) * (b[1] - o[1]) - (a[1] - o[1]) * (b[0] - o[0]))


def convex_hull(points: np.ndarray) -> np.ndarray:
    """Indices of the hull vertices of points (N, 2), counter-clockwise (x right, y up),
    starting at the lowest-x (then lowest-y) point; fewer than 3 when the hull has no area."""
    p = np.asarray(points, dtype=float).reshape(-1, 2)
    if len(p) == 0:
        return np.empty(0, dtype=np.int64)
    order = np.lexsort((p[:, 1], p[:, 0]))
    pts = p[order].tolist()
    lower: list[int] = []
    for i in range(len(pts)):
        while len(lower) >= 2 and _cross(pts[lower[-2]], pts[lower[-1]], pts[i]) <= 0:
            lower.pop()
        lower.append(i)
    upper: list[int] = []
    for i in range(len(pts) - 1, -1, -1):
        while len(upper) >= 2 and _cross(pts[upper[-2]], pts[upper[-1]], pts[i]) <= 0:
            upper.pop()
        upper.append(i)
    chain = lower[:-1] + upper[:-1]
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
