"""The numpy image filters and normal CDF of spot detection against their reference library,
scipy (scipy.ndimage and scipy.special.ndtr), on random images and on spot images."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage, special

from analysis.image_filters import bilinear, gaussian_smooth, label_sparse, maximum_3x3
from analysis.normal_cdf import ndtr


def test_ndtr_matches_scipy_to_double_precision():
    # Reference: scipy.special.ndtr (Cephes). Phi enters the model only through differences at
    # pixel edges, so an absolute tolerance is the right measure; 1e-15 is a few units in the
    # last place of values near 1, and far below any use (1e-15 x a flux of 1e6 DN = 1e-9 DN).
    rng = np.random.default_rng(0)
    z = np.concatenate([np.linspace(-40.0, 40.0, 400_001), rng.normal(0.0, 3.0, 200_000),
                        [0.0, -9.0, 9.0, -np.inf, np.inf]])
    ours = ndtr(z)
    assert np.max(np.abs(ours - special.ndtr(z))) < 1e-15
    # Lower tail to within 1e-15 absolute too, and exact symmetry Phi(-z) = 1 - Phi(z) to rounding.
    assert np.max(np.abs(ndtr(-z) - (1.0 - ours))) < 1e-15
    assert np.isnan(ndtr(np.array([np.nan]))[0])
    assert float(ndtr(0.0)) == 0.5


@pytest.mark.parametrize("dtype, rel", [(np.float32, 1e-5), (np.float64, 1e-12)])
@pytest.mark.parametrize("shape", [(64, 80), (5, 7), (1, 9), (12, 1)])
@pytest.mark.parametrize("sigma, truncate", [(1.0, 3.0), (1.0, 4.0), (2.3, 3.0)])
def test_gaussian_smooth_matches_scipy(dtype, rel, shape, sigma, truncate):
    # Reference: scipy.ndimage.gaussian_filter(mode="nearest"). Tolerance: float32 rounding
    # (~6e-8 per operation over ~20 operations), float64 the same at 1e-16.
    rng = np.random.default_rng(1)
    img = (rng.normal(0.0, 1.0, shape) + 10.0 * (rng.random(shape) < 0.02)).astype(dtype)
    ref = ndimage.gaussian_filter(img, sigma, mode="nearest", truncate=truncate)
    ours = gaussian_smooth(img, sigma, truncate=truncate)
    assert ours.dtype == ref.dtype
    assert np.max(np.abs(ours - ref)) <= rel * np.max(np.abs(ref))


def _same_partition(mask: np.ndarray) -> None:
    ref, n_ref = ndimage.label(mask, structure=np.ones((3, 3), dtype=bool))
    flat, labels, n = label_sparse(mask)
    assert n == n_ref
    np.testing.assert_array_equal(flat, np.flatnonzero(mask))
    # scipy numbers components in raster order of their first pixel, as we do: the labels agree
    # exactly, which is the same partition up to (no) permutation.
    np.testing.assert_array_equal(labels, ref.ravel()[flat])


def test_label_matches_scipy_on_random_masks():
    # Reference: scipy.ndimage.label with the 3x3 structure (8-connectivity); densities from
    # sparse to nearly full, including thin diagonal chains and one-row / one-column masks.
    rng = np.random.default_rng(2)
    for _ in range(300):
        shape = (int(rng.integers(1, 50)), int(rng.integers(1, 50)))
        _same_partition(rng.random(shape) < rng.random())
    diag = np.eye(30, dtype=bool) | np.fliplr(np.eye(30, dtype=bool))
    _same_partition(diag)
    _same_partition(np.zeros((4, 4), dtype=bool))
    spiral = np.zeros((21, 21), dtype=bool)  # one long component that winds back on itself
    spiral[1, 1:20] = spiral[1:20, 19] = spiral[19, 1:20] = spiral[3:20, 1] = True
    spiral[3, 1:17] = spiral[3:17, 17] = spiral[17, 3:18] = spiral[5:18, 3] = True
    _same_partition(spiral)


def test_label_matches_scipy_on_spot_images():
    # Reference: scipy.ndimage.label; thresholded smoothed spots, some merging, with noise.
    rng = np.random.default_rng(3)
    yy, xx = np.mgrid[0:120, 0:160]
    img = rng.normal(0.0, 1.0, yy.shape)
    for x, y in rng.uniform([5, 5], [155, 115], (40, 2)):
        img += 30.0 * np.exp(-((xx - x) ** 2 + (yy - y) ** 2) / (2 * 1.5 ** 2))
    sm = gaussian_smooth(img.astype(np.float32), 1.0, truncate=3.0)
    for thr in (0.8, 1.5, 5.0):
        _same_partition(sm > thr)


def test_maximum_and_bilinear_match_scipy():
    # References: scipy.ndimage.maximum_filter(size=3, mode="constant", cval=-inf) and
    # scipy.ndimage.map_coordinates(order=1) at points inside the image (including its edges).
    rng = np.random.default_rng(4)
    img = rng.normal(size=(13, 17))
    img[2:5, 3:6] = -np.inf
    np.testing.assert_array_equal(maximum_3x3(img),
                                  ndimage.maximum_filter(img, size=3, mode="constant", cval=-np.inf))
    smooth = rng.normal(size=(13, 17))
    r = np.r_[rng.uniform(0, 12, 200), 0.0, 12.0, 12.0, 6.0]
    c = np.r_[rng.uniform(0, 16, 200), 0.0, 16.0, 0.0, 16.0]
    np.testing.assert_allclose(bilinear(smooth, r, c), ndimage.map_coordinates(smooth, [r, c], order=1),
                               rtol=0, atol=1e-13)
    with pytest.raises(ValueError, match="inside"):
        bilinear(smooth, np.array([13.5]), np.array([0.0]))
