"""Exact integer temporal statistics against numpy's two-pass float64 mean and variance.

Reference: numpy.mean / numpy.var(ddof=1) on float64 copies (numpy's documented two-pass
algorithm); on integer frames the sums are exact, so the two agree to float64 rounding.
"""

from __future__ import annotations

import numpy as np
import pytest

from analysis.stack_stats import temporal_mean_var


@pytest.mark.parametrize("dtype", [np.uint16, np.uint8, np.int16])
def test_integer_stack_matches_numpy_two_pass(dtype: type) -> None:
    info = np.iinfo(dtype)
    rng = np.random.default_rng(5)
    stack = rng.integers(info.min, int(info.max) + 1, size=(37, 24, 31), dtype=dtype)
    stack[:, 0, 0] = info.max            # full scale every frame: variance exactly 0
    stack[::2, 1, 1], stack[1::2, 1, 1] = info.min, info.max   # the largest spread there is
    mean, var = temporal_mean_var(stack)
    ref = stack.astype(np.float64)
    # float64 rounding of the reference's own passes bounds the agreement (a few ulp)
    np.testing.assert_allclose(mean, ref.mean(axis=0), rtol=1e-13, atol=1e-9)
    np.testing.assert_allclose(var, ref.var(axis=0, ddof=1), rtol=1e-12, atol=1e-6)
    assert var[0, 0] == 0.0


def test_large_offset_keeps_small_variance() -> None:
    """Counts near full scale with a spread of one count: the case where the one-pass formula
    in floating point loses everything (Chan, Golub & LeVeque 1983); exact sums do not."""
    stack = np.full((64, 4, 4), 65000, dtype=np.uint16)
    stack[::2] += 1                       # alternating 65000 / 65001
    _, var = temporal_mean_var(stack)
    np.testing.assert_allclose(var, 0.25 * 64 / 63, rtol=1e-15)   # population 1/4, ddof=1


def test_float_stack_and_ddof_take_the_two_pass_route() -> None:
    rng = np.random.default_rng(2)
    stack = rng.normal(100.0, 3.0, size=(9, 5, 6)).astype(np.float32)
    mean, var = temporal_mean_var(stack, ddof=0)
    ref = stack.astype(np.float64)
    np.testing.assert_allclose(mean, ref.mean(axis=0), rtol=1e-15)
    np.testing.assert_allclose(var, ref.var(axis=0), rtol=1e-15)


def test_refuses_a_single_frame_with_the_shape() -> None:
    with pytest.raises(ValueError, match=r"\(1, 4, 4\)"):
        temporal_mean_var(np.zeros((1, 4, 4), dtype=np.uint16))
