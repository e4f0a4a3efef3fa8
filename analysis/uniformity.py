"""Spatial non-uniformity and bad-pixel count of a flat-field (open aperture) frame.

Non-uniformity is the spatial standard deviation over the mean signal above the dark level
(the PRNU/DSNU style of EMVA 1288, release 4.0, on an averaged frame so temporal noise is
suppressed). Bad pixels are those deviating from a robust local level by more than `n_sigma`
robust standard deviations (median and 1.4826 x MAD: common practice).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.ndimage import median_filter

from analysis.verdicts import SpecKey, Verdict

SPEC_KEYS = {
    "max_gain_nonuniformity_percent": SpecKey(
        "max_gain_nonuniformity_percent", "gain non-uniformity", "%", "max",
        "spatial std of the per-pixel response between two flats over its mean, bad pixels and "
        "temporal noise excluded", conditions=("cool_c", "warm_c")),
    "max_offset_nonuniformity_k": SpecKey(
        "max_offset_nonuniformity_k", "offset non-uniformity", "K", "max",
        "spatial std of the offset pattern (gain part removed) over the SiTF",
        conditions=("cool_c", "warm_c")),
}


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

    >>> frame = np.full((32, 32), 1000.0)
    >>> frame[5, 7] = 3000.0                       # one hot pixel
    >>> u = uniformity(frame)
    >>> u.bad_pixels, u.nonuniformity_percent     # found, and left out of the figure
    (1, 0.0)
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


@dataclass(frozen=True)
class TwoPointUniformity:
    """Gain and offset non-uniformity, separated with flats at two source levels.

    Gain (PRNU-like, EMVA 1288 4.0 style): spatial std of the per-pixel response (warm minus
    cool) over its mean, in %. Offset (DSNU-like): spatial std of the cool flat once its gain
    part (response x S_cool / dS, the ratio found by regression over the pixels, assuming
    uncorrelated offset and gain patterns) is removed, in counts and, through the SiTF, in
    kelvin of source temperature. Neither depends on the level the flats
    were taken at, unlike one flat's std over its total counts. Bad pixels are left out.
    """

    gain_nonuniformity_percent: float
    offset_nonuniformity_counts: float
    offset_nonuniformity_k: float | None
    mean_response_counts: float
    pixels_used: int
    conditions: dict[str, object]

    def verdicts(self, limits: dict[str, float]) -> list[Verdict]:
        """Judge whichever spec keys `limits` holds; the std of N pixels is uncertain by
        1/sqrt(2 (N - 1)) relative (normal sample)."""
        rel = 1.0 / math.sqrt(2.0 * max(self.pixels_used - 1, 1))
        values = {"max_gain_nonuniformity_percent": self.gain_nonuniformity_percent,
                  "max_offset_nonuniformity_k": self.offset_nonuniformity_k}
        cond = {k: v for k, v in self.conditions.items() if k in ("cool_c", "warm_c")}
        return [SPEC_KEYS[k].judge(values[k], rel * values[k], float(limits[k]), cond)
                for k in SPEC_KEYS if k in limits and values[k] is not None]

    def to_dict(self) -> dict[str, object]:
        return {"gain_nonuniformity_percent": self.gain_nonuniformity_percent,
                "offset_nonuniformity_counts": self.offset_nonuniformity_counts,
                "offset_nonuniformity_k": self.offset_nonuniformity_k,
                "mean_response_counts": self.mean_response_counts,
                "pixels_used": self.pixels_used, "conditions": dict(self.conditions)}


def two_point_uniformity(mean_cool: np.ndarray, mean_warm: np.ndarray,
                         bad_pixel_mask: np.ndarray | None = None,
                         sitf_counts_per_k: float | None = None,
                         temporal_variance_of_means: tuple[float, float] = (0.0, 0.0),
                         conditions: dict[str, object] | None = None) -> TwoPointUniformity:
    """Gain and offset non-uniformity from mean flats at two source temperatures.

    `temporal_variance_of_means`: the temporal noise left in each mean frame (per-pixel
    temporal variance / frames averaged, for the cool and the warm flat), removed from the
    spatial variances so that only the fixed pattern is reported.

    >>> import numpy as np
    >>> gain = np.array([[0.99, 1.01], [1.0, 1.0]])
    >>> r = two_point_uniformity(100 + gain * 1000, 100 + gain * 2000)
    >>> round(r.gain_nonuniformity_percent, 3), round(r.offset_nonuniformity_counts, 6)
    (0.816, 0.0)
    """
    cool = np.asarray(mean_cool, dtype=np.float64)
    resp = np.asarray(mean_warm, dtype=np.float64) - cool
    good = np.isfinite(resp) & np.isfinite(cool)
    if bad_pixel_mask is not None:
        good &= ~np.asarray(bad_pixel_mask, dtype=bool)
    if good.sum() < 2:
        raise ValueError("uniformity: fewer than 2 good pixels")
    r = resp[good]
    mean_r = float(r.mean())
    if not mean_r > 0:
        raise ValueError("uniformity: the warm flat is not brighter than the cool one")
    vc, vw = (float(v) for v in temporal_variance_of_means)
    gain_nu = 100.0 * math.sqrt(max(float(r.var(ddof=1)) - vc - vw, 0.0)) / mean_r
    # cool = dark + offset + gain x S_cool, and response = gain x dS: the gain part of the cool
    # level is response x (S_cool / dS), with S_cool / dS (the dark level) unknown. It is
    # estimated by regressing the cool level on the response over the pixels, which assumes
    # the offset and gain patterns are uncorrelated.
    # The temporal noise left in the means would dilute the slope (errors in the regressor:
    # the response's noise variance vc + vw inflates its variance, and since response = warm -
    # cool its noise is anti-correlated with the cool level's by -vc), so both are removed
    # first (the usual correction for regression dilution; common practice).
    c = cool[good]
    rc = r - mean_r
    n = max(len(r) - 1, 1)
    var_r = float(np.dot(rc, rc)) / n - vc - vw
    cov_cr = float(np.dot(c - c.mean(), rc)) / n + vc
    k = cov_cr / var_r if var_r > 0 else 0.0
    level_free = c - k * r
    # level_free = (1 + k) cool - k warm: its temporal noise is (1 + k)^2 vc + k^2 vw
    noise_free = float(level_free.var(ddof=1)) - (1 + k) ** 2 * vc - k * k * vw
    off = math.sqrt(max(noise_free, 0.0))
    off_k = off / abs(sitf_counts_per_k) if sitf_counts_per_k else None
    return TwoPointUniformity(gain_nu, off, off_k, mean_r, int(good.sum()), dict(conditions or {}))
