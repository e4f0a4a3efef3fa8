"""Nearest neighbours of 2-D points within a distance bound, with numpy only.

Why: the spot matcher needs "which detected spot lies within the gate of this predicted point"
thousands of times per frame; a k-d tree library costs more to import than the whole analysis
takes. Points are (N, 2) arrays (x, y).

Method: a uniform cell grid ("bucketing", Bentley, Weide & Yao, ACM TOMS 6:563, 1980): points
are sorted by the cell of side `cell` they fall in; every point within distance b <= cell of a
query lies in the 3x3 block of cells around the query's cell, so a bounded query looks only
there, and the cost grows linearly with the number of points when the cells hold a few points
each (the spots of a grid target are about a pitch apart, the cell under half a pitch).
Each query reads a fixed 3x3 block of a dense cell table, so a search is a few whole-array
operations. Unbounded nearest neighbours repeat the bounded search with a doubled bound for the queries
still unanswered. Ties in distance go to the lowest point index.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["PointGrid", "k_nearest", "mutual_nearest", "nearest_neighbour_distances"]

# Up to this many points, all pairwise distances are cheaper than a cell grid.
_BRUTE_FORCE = 400
# Largest cell table (cells x slots); a wider spread of points gets larger cells instead.
_MAX_TABLE = 1 << 22


class PointGrid:
    """Points bucketed by cells of side `cell`; answers queries with bounds up to `cell`.

    The table holds, per occupied cell, the indices of its points in `slots` columns (the most
    any cell holds), padded with len(points), whose coordinates are infinite; two rings of empty cells
    around the occupied ones let every query read its 3x3 block without bounds checks.
    """

    def __init__(self, points: np.ndarray, cell: float) -> None:
        p = np.asarray(points, dtype=float).reshape(-1, 2)
        if not np.all(np.isfinite(p)):
            raise ValueError("points must be finite numbers (no NaN or infinity)")
        if not (cell > 0 and math.isfinite(cell)):
            raise ValueError(f"cell size must be a positive finite number, got {cell}")
        n = len(p)
        self.points = p
        self._px = np.append(p[:, 0], np.inf)  # index n: no point
        self._py = np.append(p[:, 1], np.inf)
        lo = p.min(axis=0) if n else np.zeros(2)
        span = (p.max(axis=0) - lo) if n else np.zeros(2)
        cell = float(cell)
        while float(np.prod(np.floor(span / cell) + 5.0)) > _MAX_TABLE:
            cell *= 2.0  # still exact for bounds <= cell, only coarser
        shape = np.floor(span / cell).astype(np.int64) + 5  # 2 empty rings each side
        self.cell = cell
        self.origin = lo - 2.0 * cell
        self.shape = shape
        key = self._keys(p)
        n_cells = int(shape[0] * shape[1])
        self.slots = int(np.bincount(key, minlength=1).max()) if n else 1
        if self.slots == 1:  # the usual case: one point per cell at most
            self._table1 = np.full(n_cells, n, dtype=np.int64)
            self._table1[key] = np.arange(n)
            self._table = self._table1[:, None]
        else:
            order = np.argsort(key, kind="stable")
            sk = key[order]
            first = np.ones(n, dtype=bool)
            first[1:] = sk[1:] != sk[:-1]
            starts = np.nonzero(first)[0]
            rank = np.arange(n) - np.repeat(starts, np.diff(np.append(starts, n)))  # place within its cell
            # rows only for the occupied cells (and one empty row, 0, for all the others): a
            # far outlier that coarsens the cells and piles the points into a few of them
            # costs (occupied cells x slots), never (all cells x slots)
            row = np.cumsum(first).astype(np.int32)  # 1.. per occupied cell, in key order
            self._row = np.zeros(n_cells, dtype=np.int32)
            self._row[sk] = row
            occupied = np.full((int(row[-1]) + 1, self.slots), n, dtype=np.int64)
            occupied[row, rank] = order
            self._table = occupied
            self._table1 = occupied[:, 0][self._row]
        w = int(shape[1])
        self._block = np.array([di * w + dj for di in (-1, 0, 1) for dj in (-1, 0, 1)], dtype=np.int64)

    def _keys(self, q: np.ndarray) -> np.ndarray:
        c = np.floor((q - self.origin) / self.cell)
        # Queries outside the table land on its outer empty ring (their 3x3 block stays inside).
        c0 = np.clip(c[:, 0], 1, self.shape[0] - 2).astype(np.int64)
        c1 = np.clip(c[:, 1], 1, self.shape[1] - 2).astype(np.int64)
        return c0 * int(self.shape[1]) + c1

    def candidates(self, queries: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Point indices (Q, 9 x slots) of the 3x3 cell block of each query (len(points)
        where a slot is empty) and their squared distances (inf for empty slots)."""
        q = np.asarray(queries, dtype=float).reshape(-1, 2)
        good = np.isfinite(q[:, 0]) & np.isfinite(q[:, 1])
        qq = q if good.all() else np.where(good[:, None], q, 0.0)
        cells = self._keys(qq)[:, None] + self._block[None, :]  # (Q, 9)
        if self.slots == 1:
            idx = self._table1.take(cells)
        else:
            idx = self._table[self._row.take(cells)].reshape(len(q), -1)
        if not good.all():
            idx[~good] = len(self.points)
        dx = self._px.take(idx)
        dx -= qq[:, 0, None]
        dy = self._py.take(idx)
        dy -= qq[:, 1, None]
        dx *= dx
        dy *= dy
        dx += dy  # inf for the empty slots
        return idx, dx

    def _check(self, bound: float) -> None:
        if bound > self.cell * (1 + 1e-12):
            raise ValueError(f"bound {bound} exceeds the cell size {self.cell}; build the grid with a larger cell")

    def pairs(self, queries: np.ndarray, bound: float,
              strict: bool = False) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Every (query index, point index, squared distance) with distance <= bound
        (< bound when strict). bound must not exceed the cell size."""
        self._check(bound)
        idx, d2 = self.candidates(queries)
        keep = d2 < bound * bound if strict else d2 <= bound * bound
        qi, k = np.nonzero(keep)
        return qi, idx[qi, k], d2[qi, k]

    def any_within(self, queries: np.ndarray, bound: float, strict: bool = False) -> np.ndarray:
        """Whether each query has a point within bound (< bound when strict)."""
        self._check(bound)
        _, d2 = self.candidates(queries)
        return (d2 < bound * bound if strict else d2 <= bound * bound).any(axis=1)

    def nearest(self, queries: np.ndarray, bound: float, strict: bool = False) -> tuple[np.ndarray, np.ndarray]:
        """Distance to and index of each query's nearest point within bound (inf and
        len(points) where none, as k-d tree libraries report it). Ties: the lowest index."""
        self._check(bound)
        idx, d2 = self.candidates(queries)
        n = len(self.points)
        best = d2.min(axis=1, initial=np.inf)
        j = np.where(d2 == best[:, None], idx, n).min(axis=1, initial=n)  # ties: the lowest index
        ok = best < bound * bound if strict else best <= bound * bound
        return np.where(ok, np.sqrt(best), np.inf), np.where(ok, j, n)


def _group_minimum(group: np.ndarray, other: np.ndarray, d2: np.ndarray) -> np.ndarray:
    """Positions of the smallest d2 of each group (ties: the smallest `other`)."""
    if len(group) == 0:
        return np.empty(0, dtype=np.int64)
    order = np.lexsort((other, d2, group))
    g = group[order]
    new = np.ones(len(g), dtype=bool)
    new[1:] = g[1:] != g[:-1]
    return order[new]


def mutual_nearest(grid: PointGrid, queries: np.ndarray, gate: float) -> np.ndarray:
    """Pairs [point, query] (K, 2), ordered by query, where each is the other's nearest
    neighbour and their distance is <= gate (gate <= the grid's cell).

    Any point within the gate of a query is in that query's cell block, so the nearest query
    of a point (when it lies within the gate) is among the same candidates: one search gives
    both directions. Ties: the lowest index."""
    grid._check(gate)
    q = np.asarray(queries, dtype=float).reshape(-1, 2)
    idx, d2 = grid.candidates(q)
    n = len(grid.points)
    within = d2 <= gate * gate
    d2 = np.where(within, d2, np.inf)
    best = d2.min(axis=1, initial=np.inf)
    best_p = np.where(d2 == best[:, None], idx, n).min(axis=1, initial=n)  # nearest point of each query
    qi, k = np.nonzero(within)
    pj = idx[qi, k]
    f = _group_minimum(pj, qi, d2[qi, k])
    best_q = np.full(n + 1, -1, dtype=np.int64)  # nearest query of each point (n: no point)
    best_q[pj[f]] = qi[f]
    e = np.nonzero(best_q[best_p] == np.arange(len(q)))[0]
    return np.column_stack([best_p[e], e])


def nearest_neighbour_distances(points: np.ndarray) -> np.ndarray:
    """Distance from each point to its nearest other point (0 for duplicates; inf when alone)."""
    p = np.asarray(points, dtype=float).reshape(-1, 2)
    n = len(p)
    out = np.full(n, np.inf)
    if n < 2:
        return out
    span = p.max(axis=0) - p.min(axis=0)
    extent = float(np.hypot(*span))
    if extent == 0.0:
        return np.zeros(n)
    if n <= _BRUTE_FORCE:
        d2 = (p[:, None, 0] - p[None, :, 0]) ** 2 + (p[:, None, 1] - p[None, :, 1]) ** 2
        np.fill_diagonal(d2, np.inf)
        return np.sqrt(d2.min(axis=1))
    # Start a little above the mean spacing (area per point, or length per point when the
    # points lie on a line: one pass for a regular grid) and double until every point has
    # found a neighbour.
    area = float(span[0] * span[1])
    bound = 1.5 * max(math.sqrt(area / n), extent / n)
    todo = np.arange(n)
    while len(todo):
        grid = PointGrid(p, bound)
        qi, pj, d2 = grid.pairs(p[todo], bound)
        other = todo[qi] != pj
        qi, pj, d2 = qi[other], pj[other], d2[other]
        f = _group_minimum(qi, pj, d2)
        out[todo[qi[f]]] = np.sqrt(d2[f])
        todo = todo[~np.isfinite(out[todo])]
        bound *= 2.0
    return out


def k_nearest(points: np.ndarray, queries: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """The k nearest points of each query by brute force, nearest first (ties: lowest index):
    distances and indices (Q, k). For a few queries only (cost Q x N)."""
    p = np.asarray(points, dtype=float).reshape(-1, 2)
    q = np.asarray(queries, dtype=float).reshape(-1, 2)
    k = min(int(k), len(p))
    dx = q[:, None, 0] - p[None, :, 0]
    dy = q[:, None, 1] - p[None, :, 1]
    d = np.sqrt(dx * dx + dy * dy)
    idx = np.argsort(d, axis=1, kind="stable")[:, :k]
    return np.take_along_axis(d, idx, axis=1), idx
