"""Small numerical helpers of the distortion analysis against numpy (the reference library)."""

from __future__ import annotations

import numpy as np
import pytest

from analysis.distortion import _median


@pytest.mark.parametrize("n", [1, 2, 3, 4, 7, 10, 163, 326])
def test_median_equals_numpy_median(n):
    rng = np.random.default_rng(n)
    for _ in range(40):
        v = rng.normal(size=n) * 10.0 ** rng.uniform(-6, 6)
        assert _median(v) == float(np.median(v))  # bit for bit: same middle value(s), same mean
    ties = np.repeat(rng.normal(size=max(1, n // 2)), 2)[:n]
    assert _median(ties) == float(np.median(ties))
