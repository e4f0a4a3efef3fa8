"""Signal transfer function (SiTF) and noise-equivalent temperature difference (NETD).

SiTF is the slope of the UUT's output against the blackbody temperature difference over the linear
range; NETD is the temporal noise divided by the SiTF. Temporal noise is the square root of the
mean per-pixel temporal variance: variances are averaged, not standard deviations (the usual
thermal-imager test practice; see e.g. Opt. Eng. 29(7), 1990). Report f-number, integration time
and background temperature with the result (common practice).

These are the plain textbook reductions. For a NETD to sign (SiTF against the absolute source
temperature following Planck's curvature, evaluated at the spec temperature, bad pixels masked,
with an uncertainty budget) use `analysis.netd.measure_netd`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from analysis.stack_stats import temporal_mean_var


@dataclass(frozen=True)
class SitfResult:
    """Slope in output units (counts) per kelvin, with the fit's quality."""

    sitf_counts_per_k: float
    intercept_counts: float
    r_squared: float
    delta_t_k: tuple[float, ...]
    signal_counts: tuple[float, ...]


@dataclass(frozen=True)
class NetdResult:
    netd_k: float
    temporal_noise_counts: float
    sitf_counts_per_k: float
    frames: int


def central_mean(image: np.ndarray, fraction: float = 0.5) -> float:
    """Mean of the central `fraction` of the frame (rows and columns), away from edge effects.

    >>> central_mean(np.arange(16.0).reshape(4, 4))   # the middle 2 x 2: 5, 6, 9, 10
    7.5
    """
    rows, cols = image.shape[-2:]
    r0 = int(rows * (1 - fraction) / 2)
    c0 = int(cols * (1 - fraction) / 2)
    return float(np.mean(image[..., r0:rows - r0, c0:cols - c0]))


def fit_sitf(delta_t_k: Sequence[float], signal_counts: Sequence[float]) -> SitfResult:
    """Least-squares line of signal against temperature difference (needs two or more points).

    >>> fit = fit_sitf([1.0, 2.0, 3.0], [110.0, 120.0, 130.0])
    >>> round(fit.sitf_counts_per_k, 9), round(fit.r_squared, 9)
    (10.0, 1.0)
    """
    x = np.asarray(delta_t_k, dtype=float)
    y = np.asarray(signal_counts, dtype=float)
    if x.size < 2 or np.ptp(x) == 0:
        raise ValueError("SiTF needs captures at two or more different temperature differences")
    slope, intercept = np.polyfit(x, y, 1)
    fitted = slope * x + intercept
    ss_res = float(np.sum((y - fitted) ** 2))
    ss_tot = float(np.sum((y - y.mean()) ** 2))
    r2 = 1.0 - ss_res / ss_tot if ss_tot > 0 else 1.0
    return SitfResult(float(slope), float(intercept), r2, tuple(x.tolist()), tuple(y.tolist()))


def temporal_noise(stack: np.ndarray) -> float:
    """RMS temporal noise: sqrt of the per-pixel temporal variance averaged over the frame.

    `stack` is (frames, rows, cols). Uses the unbiased variance (ddof=1) per pixel.

    >>> two = np.stack([np.zeros((4, 4)), np.full((4, 4), 2.0)])   # each pixel: 0 then 2
    >>> round(temporal_noise(two), 6)                              # sqrt(var) = sqrt(2)
    1.414214
    """
    if stack.ndim != 3 or stack.shape[0] < 2:
        raise ValueError("temporal noise needs a stack of two or more frames (frames, rows, cols)")
    _, var = temporal_mean_var(stack)
    return float(np.sqrt(np.mean(var)))


def netd(stack: np.ndarray, sitf_counts_per_k: float) -> NetdResult:
    """NETD = temporal noise / SiTF.

    >>> two = np.stack([np.zeros((4, 4)), np.full((4, 4), 2.0)])
    >>> round(netd(two, 10.0).netd_k, 6)                          # 1.414 counts / 10 counts/K
    0.141421
    """
    if sitf_counts_per_k == 0:
        raise ValueError("SiTF is zero: the camera shows no response to the blackbody")
    noise = temporal_noise(stack)
    return NetdResult(noise / abs(sitf_counts_per_k), noise, sitf_counts_per_k, stack.shape[0])
