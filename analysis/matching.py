"""Pair detected spots with the expected points of a target grid.

Survives missing spots, extra spots (a hot pixel, a reflection) and an unknown small offset,
roll and scale of the target. All points are (x, y) = (column, row) in pixels, arrays (N, 2).

Method: first the nominal place itself, refined as below; only when that leaves a point unpaired,
translation hypotheses by voting (a few detected spots near the middle of the pattern
paired with the expected points nearest to them, each hypothesis scored on a fixed-size subset
by how many expected points then find a detected spot nearby, so the cost grows about linearly
with the number of points; a generalised Hough / "alignment by voting" scheme, common practice in
star-pattern and grid registration), then refinement of the best hypotheses by an iterative
closest point loop (Besl & McKay, IEEE PAMI 14:239, 1992) with mutual nearest neighbours inside
a shrinking gate. Neighbours come from a cell grid over the detected spots (analysis.neighbours),
built once with cells as large as the widest gate. Each refinement step solves the
complex-linear least-squares model ``z' = a z + b z |z|^2 / R^2 + t`` (a: scale and roll, as
in Umeyama's similarity, IEEE PAMI 13:376, 1991; b: a radial term so that a lens whose
distortion differs from the nominal one still lines up; t: offset), with z measured from the
centre of the expected pattern.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from analysis.fast_median import median
from analysis.neighbours import PointGrid, k_nearest, mutual_nearest, nearest_neighbour_distances

__all__ = ["PatternTransform", "MatchResult", "match_points"]


@dataclass(frozen=True)
class PatternTransform:
    """Maps expected points to where they were found: ``c + a z + b z |z|^2 / R^2 + t``, z = p - c."""

    a: complex
    b: complex
    t: complex
    centre: tuple[float, float]
    ref_radius: float

    @property
    def scale(self) -> float:
        """Scale of the target against the expectation (1 = nominal)."""
        return abs(self.a)

    @property
    def roll_deg(self) -> float:
        """Rotation of the found pattern against the expectation, deg, from +x toward +y."""
        return math.degrees(math.atan2(self.a.imag, self.a.real))

    @property
    def offset_px(self) -> tuple[float, float]:
        """Shift (x, y) of the pattern centre, pixels."""
        return self.t.real, self.t.imag

    def apply(self, points: np.ndarray) -> np.ndarray:
        """Transform expected points (N, 2) (x, y)."""
        p = np.asarray(points, dtype=float)
        c = complex(*self.centre)
        z = p[:, 0] + 1j * p[:, 1] - c
        w = c + self.a * z + self.b * z * (np.abs(z) ** 2) / self.ref_radius ** 2 + self.t
        return np.column_stack([w.real, w.imag])


@dataclass(frozen=True)
class MatchResult:
    """Index pairs (K, 2) as [detected_index, expected_index], the transform, and leftovers."""

    pairs: np.ndarray
    transform: PatternTransform
    unmatched_detected: np.ndarray
    unmatched_expected: np.ndarray
    rms_px: float
    gate_px: float


def _solve(z_exp: np.ndarray, z_det: np.ndarray, radial: bool, ref_radius: float) -> tuple[complex, complex, complex]:
    """Least squares of z_det = a z + b z|z|^2/R^2 + t (complex-linear), by the normal
    equations (2 or 3 unknowns, columns of like size since z is centred and scaled by R)."""
    cols = [z_exp, np.ones_like(z_exp)]
    if radial:
        cols.insert(1, z_exp * (z_exp.real ** 2 + z_exp.imag ** 2) / ref_radius ** 2)
    A = np.column_stack(cols)
    AH = A.conj().T
    try:
        sol = np.linalg.solve(AH @ A, AH @ z_det)
    except np.linalg.LinAlgError:
        sol, *_ = np.linalg.lstsq(A, z_det, rcond=None)
    if radial:
        return complex(sol[0]), complex(sol[1]), complex(sol[2])
    return complex(sol[0]), 0j, complex(sol[1])


def _predict(z: np.ndarray, c: complex, a: complex, b: complex, t: complex, ref_radius: float) -> np.ndarray:
    w = c + a * z + b * z * np.abs(z) ** 2 / ref_radius ** 2 + t
    return np.column_stack([w.real, w.imag])


def _mutual(grid_det: PointGrid, pred: np.ndarray, gate: float) -> np.ndarray:
    """Mutual nearest-neighbour pairs [det, exp] closer than gate."""
    return mutual_nearest(grid_det, pred, gate)


def _others(n: int, used: np.ndarray) -> np.ndarray:
    """Indices 0..n-1 not in used, ascending."""
    free = np.ones(n, dtype=bool)
    free[used] = False
    return np.nonzero(free)[0]


def match_points(
    detected: np.ndarray,
    expected: np.ndarray,
    *,
    gate_px: float | None = None,
    max_offset_px: float | None = None,
    radial: bool = True,
    iterations: int = 12,
    n_candidates: int = 16,
    subset: int = 32,
) -> MatchResult:
    """Pair detected (M, 2) with expected (N, 2) points, both (x, y) pixels.

    gate_px: final pairing distance after the transform (default 0.3 x the expected grid
    pitch). max_offset_px: largest plausible shift of the pattern (default: within the
    n_candidates expected points nearest the middle seeds, i.e. a couple of grid pitches
    beyond the nominal place). subset: expected points each hypothesis is scored on. Raises
    ValueError when fewer than 3 points can be paired, with the counts in the message.
    """
    det = np.asarray(detected, dtype=float).reshape(-1, 2)
    exp = np.asarray(expected, dtype=float).reshape(-1, 2)
    if len(det) < 3 or len(exp) < 3:
        raise ValueError(
            f"matching needs at least 3 detected and 3 expected points, got {len(det)} detected "
            f"and {len(exp)} expected; check the detection threshold and the target definition"
        )
    if not (np.all(np.isfinite(det)) and np.all(np.isfinite(exp))):
        raise ValueError("detected and expected points must be finite numbers (no NaN or infinity)")
    pitch = median(nearest_neighbour_distances(exp))
    if pitch <= 0:
        raise ValueError("expected points contain duplicates (zero grid pitch); check the target definition")
    gate = gate_px if gate_px is not None else 0.3 * pitch
    centre = exp.mean(axis=0)
    c = complex(*centre)
    ref_radius = float(np.max(np.hypot(*(exp - centre).T))) or 1.0
    z_exp = exp[:, 0] + 1j * exp[:, 1] - c
    # One cell grid over the detections serves every search below (bounds up to its cell).
    grid_det = PointGrid(det, max(gate, 0.45 * pitch))

    def refine(shift: np.ndarray, first_at_least: int = 3
               ) -> tuple[int, float, np.ndarray, tuple[complex, complex, complex]] | None:
        """Iterative closest point from a pure shift: pairs, their rms and the transform
        (None when the first, widest pairing finds fewer than first_at_least pairs)."""
        a, b, t = 1 + 0j, 0j, complex(*shift)
        pairs = np.empty((0, 2), dtype=int)
        settled = False
        for it in range(iterations):
            pred = _predict(z_exp, c, a, b, t, ref_radius)
            g = max(gate, 0.45 * pitch * 0.75 ** it)  # shrink to the final gate in a few steps
            new_pairs = _mutual(grid_det, pred, g)
            if len(new_pairs) < (first_at_least if it == 0 else 3):
                break
            if g == gate and np.array_equal(new_pairs, pairs):
                # Settled: the transform was solved from these very pairs, so solving again,
                # predicting and pairing at the final gate would give them back unchanged.
                settled = True
                break
            use_radial = radial and len(new_pairs) >= 8
            zd = det[new_pairs[:, 0], 0] + 1j * det[new_pairs[:, 0], 1] - c
            a, b, t = _solve(z_exp[new_pairs[:, 1]], zd, use_radial, ref_radius)
            pairs = new_pairs
        if len(pairs) < 3:
            return None
        if settled:
            pred_xy = pred
        else:
            pred_xy = _predict(z_exp, c, a, b, t, ref_radius)
            pairs = _mutual(grid_det, pred_xy, gate)
        res = det[pairs[:, 0]] - pred_xy[pairs[:, 1]]
        rms = float(np.sqrt(np.mean(np.sum(res ** 2, axis=1)))) if len(pairs) else math.inf
        return len(pairs), rms, pairs, (a, b, t)

    # 0. The nominal place first: when refining from no shift pairs every detected spot or every
    #    expected point, no hypothesis can pair more, and any other that paired as many would lie
    #    a grid pitch further from the nominal place (the tie rule below), so the voting is
    #    skipped. A frame off by more than the first gate, or with a spot missing, goes on to it.
    #    Half the points must pair at the first gate, or the try ends there.
    every = min(len(det), len(exp))
    best = refine(np.zeros(2), max(3, every // 2)) if max_offset_px is None else None
    if best is None or best[0] < every:
        best = _vote_and_refine(det, exp, z_exp, grid_det, pitch, max_offset_px, n_candidates, subset, refine)
    if best is None or best[0] < 3:
        raise ValueError(
            f"could not pair the {len(det)} detected spots with the {len(exp)} expected points "
            "(fewer than 3 pairs); check the target, the collimator focal length and the UUT focal "
            "length, or pass a larger gate"
        )
    n, rms, pairs, (a, b, t) = best
    pairs = pairs[np.argsort(pairs[:, 1])]
    return MatchResult(
        pairs=pairs,
        transform=PatternTransform(a=a, b=b, t=t, centre=(float(centre[0]), float(centre[1])), ref_radius=ref_radius),
        unmatched_detected=_others(len(det), pairs[:, 0]),
        unmatched_expected=_others(len(exp), pairs[:, 1]),
        rms_px=rms,
        gate_px=gate,
    )


_Refined = tuple[int, float, np.ndarray, tuple[complex, complex, complex]]


def _vote_and_refine(det: np.ndarray, exp: np.ndarray, z_exp: np.ndarray, grid_det: PointGrid, pitch: float,
                     max_offset_px: float | None, n_candidates: int, subset: int,
                     refine: Callable[[np.ndarray], _Refined | None]) -> _Refined | None:
    """Translation hypotheses by voting, the best two refined (refine: the ICP of match_points)."""
    # 1. Translation hypotheses, near-linear in the number of points: a few detected spots near
    #    the middle of the detected pattern (least affected by an unknown roll or scale), each
    #    paired only with the expected points nearest to it; each hypothesis scored on a fixed
    #    subset (the expected points nearest the pattern centre) by the count that find a
    #    detection within 0.45 pitch.
    dmid = np.array([median(det[:, 0]), median(det[:, 1])])
    seeds = det[np.argsort(np.hypot(*(det - dmid).T))[: min(3, len(det))]]
    k = min(n_candidates, len(exp))
    _, cand = k_nearest(exp, seeds, k)
    cand = np.asarray(cand).reshape(len(seeds), k)
    shifts = (seeds[:, None, :] - exp[cand]).reshape(-1, 2)
    if max_offset_px is not None:
        base = np.median(det, axis=0) - np.median(exp, axis=0)
        shifts = shifts[np.hypot(*(shifts - base).T) <= max_offset_px + pitch]
        if len(shifts) == 0:
            shifts = base[None, :]
    sub = exp[np.argsort(np.abs(z_exp))[: min(subset, len(exp))]]
    moved = (sub[None, :, :] + shifts[:, None, :]).reshape(-1, 2)
    found = grid_det.any_within(moved, 0.45 * pitch, strict=True)
    score = found.reshape(len(shifts), len(sub)).sum(axis=1)
    # A shift by a whole grid pitch also fits the middle: re-score the distinct leading shifts
    # (at most 48) on points spread over the whole pattern (every k-th, at most 512), where
    # the rows that fall off the detected pattern tell them apart.
    lead_all = np.nonzero(score >= 0.7 * score.max())[0]
    lead_all = lead_all[np.argsort(-score[lead_all], kind="stable")]
    # Distinct shifts: the best of each cell of 0.3 pitch (one vectorised pass).
    cells = np.round(shifts[lead_all] / (0.3 * pitch)).astype(np.int64)
    cells -= cells.min(axis=0)
    _, first = np.unique(cells[:, 0] * (int(cells[:, 1].max()) + 1) + cells[:, 1], return_index=True)
    lead = lead_all[np.sort(first)][:48].tolist()
    lead_arr = np.array(lead)
    spread = exp[:: max(1, len(exp) // 512)]
    moved = (spread[None, :, :] + shifts[lead_arr][:, None, :]).reshape(-1, 2)
    found = grid_det.any_within(moved, 0.45 * pitch, strict=True)
    full = found.reshape(len(lead_arr), len(spread)).sum(axis=1)
    lead = lead_arr
    order: list[int] = []
    # Equal scores: a periodic grid with an edge row or column unseen fits one pitch off just as
    # well; the expectation decides, so the smaller shift from the nominal place goes first.
    for h in lead[np.lexsort((np.hypot(*shifts[lead].T), -full))]:
        # Distinct hypotheses only: the same shift found from another seed adds nothing.
        if all(np.hypot(*(shifts[h] - shifts[o])) > 0.3 * pitch for o in order):
            order.append(int(h))
        if len(order) == 2:
            break

    best: _Refined | None = None
    for h in order:
        found_h = refine(shifts[h])
        if found_h is None:
            continue
        n_p, _, _, (_, _, t) = found_h
        # More pairs wins; on a tie the hypothesis nearer the nominal place (see above).
        if best is None or n_p > best[0] or (n_p == best[0] and abs(t) < abs(best[3][2])):
            best = found_h
        if n_p >= 0.95 * min(len(det), len(exp)):
            break  # (nearly) everything paired: no other hypothesis can do better
    return best
