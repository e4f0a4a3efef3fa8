"""Monotone-chain convex hull against scipy.spatial.ConvexHull (Qhull, the reference library)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial import ConvexHull, QhullError  # reference implementation

from analysis.distortion_figures import Hull
from analysis.hull2d import convex_hull, hull_equations


def _cyclic_equal(a, b):
    a, b = list(a), list(b)
    if len(a) != len(b) or not a:
        return a == b
    k = b.index(a[0]) if a[0] in b else -1
    return k >= 0 and a == b[k:] + b[:k]


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("n", [3, 4, 10, 200, 3000])
def test_vertices_equal_qhull_in_the_same_order(seed, n):
    rng = np.random.default_rng(seed)
    pts = rng.normal(0, 1, (n, 2)) if seed % 2 else rng.uniform(-1, 1, (n, 2))
    ref = ConvexHull(pts)
    got = convex_hull(pts)
    # Qhull lists 2-D hull vertices counter-clockwise from its own start: same cycle.
    assert _cyclic_equal(got.tolist(), ref.vertices.tolist())


def test_equations_match_qhull_facets():
    rng = np.random.default_rng(3)
    pts = rng.uniform(-1, 1, (300, 2))
    eq = hull_equations(pts[convex_hull(pts)])
    ref = ConvexHull(pts).equations
    # Same set of lines (outward unit normal, offset), in any order.
    for row in eq:
        assert np.min(np.abs(ref - row).max(axis=1)) < 1e-12


def test_points_on_edges_are_not_vertices():
    X, Y = np.meshgrid(np.arange(15.0), np.arange(11.0))  # a grid: many points on the edges
    pts = np.column_stack([X.ravel(), Y.ravel()])
    got = set(convex_hull(pts).tolist())
    assert got == set(ConvexHull(pts).vertices.tolist()) == {0, 14, 150, 164}


@pytest.mark.parametrize("pts", [
    np.column_stack([np.linspace(0, 1, 9), 2 * np.linspace(0, 1, 9) + 1]),  # one line
    np.array([[1.0, 2.0]] * 5),  # one point repeated
    np.array([[0.0, 0.0], [1.0, 1.0]]),  # two points
])
def test_degenerate_sets_have_no_area_like_qhull(pts):
    with pytest.raises((QhullError, ValueError)):  # Qhull refuses a hull without area
        ConvexHull(pts)
    assert len(convex_hull(pts)) < 3
    h = Hull(pts)
    assert h.equations is None  # the documented fallback: distances to the points themselves
    np.testing.assert_allclose(h.distance_outside(pts[:1] + [3.0, 4.0]),
                               np.min(np.hypot(*(pts + 0.0 - (pts[:1] + [3.0, 4.0])).T)), rtol=1e-15)


def test_hull_distance_outside_matches_qhull_based_hull():
    rng = np.random.default_rng(8)
    pts = rng.uniform(-1, 1, (100, 2))
    q = rng.uniform(-3, 3, (500, 2))
    h = Hull(pts)
    ref = ConvexHull(pts)
    inside_ref = np.all(q @ ref.equations[:, :2].T + ref.equations[:, 2] <= 1e-12, axis=1)
    d = h.distance_outside(q)
    np.testing.assert_array_equal(d == 0, inside_ref)
    # Outside: distance to the nearest hull edge (brute force over Qhull's edges).
    a, b = pts[ref.simplices[:, 0]], pts[ref.simplices[:, 1]]
    ab = b - a
    t = np.clip(np.einsum("nmk,mk->nm", q[:, None, :] - a[None], ab) / (ab * ab).sum(1), 0, 1)
    ref_d = np.hypot(*(q[:, None, :] - (a[None] + t[..., None] * ab[None])).transpose(2, 0, 1)).min(axis=1)
    np.testing.assert_allclose(d[~inside_ref], ref_d[~inside_ref], rtol=1e-12)
