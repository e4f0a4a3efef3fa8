"""Pairing detected spots with expected grid points."""

from __future__ import annotations

import math

import numpy as np
import pytest

from analysis.matching import match_points


def _grid():
    X, Y = np.meshgrid(np.linspace(30, 610, 15), np.linspace(30, 480, 11))
    return np.column_stack([X.ravel(), Y.ravel()])


def _similarity(p, roll_deg, scale, shift, centre=(320.0, 256.0)):
    th = math.radians(roll_deg)
    R = np.array([[math.cos(th), -math.sin(th)], [math.sin(th), math.cos(th)]])
    c = np.asarray(centre)
    return (p - c) @ R.T * scale + c + np.asarray(shift)


@pytest.mark.parametrize("roll,scale,shift", [(1.5, 1.02, (9.0, -6.0)), (-2.0, 0.98, (-15.0, 12.0)), (0.0, 1.0, (0.0, 0.0))])
def test_pairs_survive_missing_extra_offset_roll_and_barrel(roll, scale, shift):
    rng = np.random.default_rng(3)
    exp = _grid()
    det = _similarity(exp, roll, scale, shift)
    c = np.array([320.0, 256.0])
    r2 = ((det - c) ** 2).sum(1) / 400.0 ** 2
    det = c + (det - c) * (1 - 0.03 * r2)[:, None]  # 3 % barrel at r = 400 px, absent from the expectation
    det += rng.normal(0, 0.05, det.shape)
    keep = rng.random(len(det)) > 0.1  # about 10 % of the spots missing
    truth_exp = np.nonzero(keep)[0]
    extras = np.array([[100.5, 200.3], [exp[50, 0] + 12.0, exp[50, 1]], [5.0, 5.0], [333.0, 251.0]])
    pts = np.vstack([det[keep], extras])
    perm = rng.permutation(len(pts))
    pts = pts[perm]
    m = match_points(pts, exp)
    truth = {int(e): i for i, e in enumerate(truth_exp)}  # expected index -> row in det[keep]
    got = {int(e): int(perm[d]) for d, e in m.pairs}
    # Every real spot paired with its own expected point, no extra spot paired.
    assert got == truth
    assert len(m.unmatched_detected) == len(extras)
    # The transform recovers the roll and shift (barrel absorbed by the radial term): to 0.05 deg
    # and 0.5 px, a tenth of what the 0.3-pitch gate tolerates.
    assert m.transform.roll_deg == pytest.approx(roll, abs=0.05)
    assert m.transform.offset_px[0] == pytest.approx(shift[0], abs=0.5)
    assert m.transform.offset_px[1] == pytest.approx(shift[1], abs=0.5)


def test_too_few_points_is_a_clear_error():
    with pytest.raises(ValueError, match="at least 3"):
        match_points(np.zeros((2, 2)), _grid())


def test_no_one_pitch_slip_with_an_edge_column_missing_and_extras():
    """A grid is periodic: a hypothesis one pitch off fits every point but one column. With the
    first column missing and 10 stray spots, every spot must still pair with its own point
    (checked against the construction, the outside truth here)."""
    rng = np.random.default_rng(16)
    exp = _grid()
    det = exp + np.array([3.0, -2.0]) + rng.normal(0, 0.05, exp.shape)
    keep = exp[:, 0] > 31.0  # the first column (x = 30) is not seen
    extras = rng.uniform([0, 0], [640, 512], (10, 2))
    pts = np.vstack([det[keep], extras])
    m = match_points(pts, exp)
    got = {int(e): int(d) for d, e in m.pairs}
    want = {int(e): i for i, e in enumerate(np.nonzero(keep)[0])}
    assert all(got.get(e) == d for e, d in want.items())
    assert m.transform.offset_px[0] == pytest.approx(3.0, abs=0.5)
