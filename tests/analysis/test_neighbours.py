"""Cell-grid nearest neighbours against scipy.spatial.cKDTree (the reference library)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial import cKDTree  # reference implementation for every check below

from analysis.neighbours import PointGrid, k_nearest, mutual_nearest, nearest_neighbour_distances


def _sets():
    rng = np.random.default_rng(11)
    uniform = rng.uniform(0, 100, (400, 2))
    X, Y = np.meshgrid(np.arange(15) * 7.0, np.arange(11) * 7.0)
    lattice = np.column_stack([X.ravel(), Y.ravel()])  # exact ties: equal spacing everywhere
    clustered = np.vstack([rng.normal(20, 0.5, (100, 2)), rng.normal(70, 3.0, (100, 2))])
    dup = np.vstack([uniform[:50], uniform[:10]])  # duplicated points: zero distances and ties
    line = np.column_stack([np.linspace(0, 50, 60), np.full(60, 3.0)])  # all on one line
    # Above 400 points the nearest other point comes from the cell grid, not all pairs.
    big = np.vstack([rng.uniform(0, 100, (3000, 2)), rng.uniform(0, 100, (40, 2)).repeat(2, axis=0)])
    X, Y = np.meshgrid(np.arange(61) * 1.7, np.arange(45) * 1.7)
    dense = np.column_stack([X.ravel(), Y.ravel()])
    long_line = np.column_stack([np.linspace(0, 50, 600), np.linspace(0, 5, 600)])
    return {"uniform": uniform, "lattice": lattice, "clustered": clustered, "dup": dup, "line": line,
            "big": big, "dense": dense, "long_line": long_line}


def _check_nearest(points, queries, bound, strict):
    grid = PointGrid(points, bound)
    dist, idx = grid.nearest(queries, bound, strict=strict)
    # cKDTree's distance_upper_bound excludes points at exactly the bound, so strict matches it
    # directly; the inclusive bound is the next float up.
    ub = bound if strict else np.nextafter(bound, np.inf)
    ref_d, ref_i = cKDTree(points).query(queries, distance_upper_bound=ub)
    np.testing.assert_array_equal(np.isfinite(dist), np.isfinite(ref_d))
    np.testing.assert_allclose(dist[np.isfinite(dist)], ref_d[np.isfinite(ref_d)], rtol=1e-15, atol=0)
    found = np.isfinite(dist)
    np.testing.assert_array_equal(idx[~found], len(points))
    # Where several points are equally near (ties), any of them is right; the reference picks
    # its own. The chosen point must then lie at the reference distance.
    chosen = np.hypot(*(queries[found] - points[idx[found]]).T)
    np.testing.assert_allclose(chosen, ref_d[found], rtol=1e-15, atol=0)
    k2 = cKDTree(points).query(queries[found], k=2, distance_upper_bound=np.inf)[0]
    unique = k2[:, 1] > k2[:, 0] * (1 + 1e-12)
    np.testing.assert_array_equal(idx[found][unique], ref_i[found][unique])


@pytest.mark.parametrize("name", ["uniform", "lattice", "clustered", "dup", "line"])
@pytest.mark.parametrize("bound", [0.5, 3.5, 7.0, 20.0])
@pytest.mark.parametrize("strict", [False, True])
def test_bounded_nearest_equals_ckdtree(name, bound, strict):
    pts = _sets()[name]
    rng = np.random.default_rng(5)
    queries = np.vstack([rng.uniform(-30, 130, (300, 2)), pts[::3] + 0.0,  # exact hits: distance 0
                         pts[:20] + np.array([bound, 0.0])])  # at exactly the bound (ties with the gate)
    _check_nearest(pts, queries, bound, strict)


@pytest.mark.parametrize("name", ["uniform", "lattice", "clustered", "dup", "line", "big", "dense", "long_line"])
def test_nearest_other_point_equals_ckdtree(name):
    pts = _sets()[name]
    ref = cKDTree(pts).query(pts, k=2)[0][:, 1]
    np.testing.assert_allclose(nearest_neighbour_distances(pts), ref, rtol=1e-15, atol=0)


def test_k_nearest_equals_ckdtree():
    rng = np.random.default_rng(2)
    pts = rng.uniform(0, 100, (500, 2))
    q = rng.uniform(0, 100, (7, 2))
    d, i = k_nearest(pts, q, 16)
    ref_d, ref_i = cKDTree(pts).query(q, k=16)
    np.testing.assert_allclose(d, ref_d, rtol=1e-15, atol=0)
    np.testing.assert_array_equal(i, ref_i)


@pytest.mark.parametrize("gate", [0.8, 2.0, 5.0])
def test_mutual_nearest_equals_ckdtree_pairs(gate):
    rng = np.random.default_rng(9)
    det = np.vstack([rng.uniform(0, 100, (300, 2)), rng.uniform(40, 45, (20, 2))])  # a crowded patch
    pred = np.vstack([det[:250] + rng.normal(0, 1.0, (250, 2)), rng.uniform(0, 100, (40, 2))])
    got = mutual_nearest(PointGrid(det, gate), pred, gate)
    # Reference: mutual nearest neighbours from two unbounded cKDTree queries, then the gate.
    d1, j_det = cKDTree(det).query(pred)
    _, j_exp = cKDTree(pred).query(det)
    e = np.arange(len(pred))
    ok = (d1 <= gate) & (j_exp[j_det] == e)
    np.testing.assert_array_equal(got, np.column_stack([j_det[ok], e[ok]]))


def test_far_outlier_keeps_results_exact():
    """One point far away makes the cell table coarse; the answers must stay exact."""
    rng = np.random.default_rng(4)
    pts = np.vstack([rng.uniform(0, 100, (200, 2)), [[1e9, -1e9]]])
    q = rng.uniform(-10, 110, (200, 2))
    _check_nearest(pts, q, 3.0, False)
    # and the table stays small: its size follows the occupied cells, not all of them
    # (it once took 2.6 GB here: 4 M cells x 200 slots)
    import tracemalloc

    tracemalloc.start()
    PointGrid(pts, 3.0)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak < 64 * 1024 * 1024, f"{peak / 1e6:.0f} MB"


def test_bad_input_is_a_clear_error():
    with pytest.raises(ValueError, match="finite"):
        PointGrid(np.array([[0.0, np.nan]]), 1.0)
    with pytest.raises(ValueError, match="cell size"):
        PointGrid(np.zeros((3, 2)), 0.0)
    with pytest.raises(ValueError, match="exceeds the cell size"):
        PointGrid(np.zeros((3, 2)), 1.0).nearest(np.zeros((1, 2)), 2.0)
