"""3-D noise of a temporal stack of flat frames (D'Agostino & Webb, Proc. SPIE 1488, 1991).

The stack ``U[t, v, h]`` (frames, rows, columns) is split with the directional averaging
operators D_t, D_v, D_h into seven orthogonal components plus the mean S::

    N_t   = D_v D_h U - S                 frame to frame (flicker)
    N_v   = D_t D_h U - S                 fixed row pattern
    N_h   = D_t D_v U - S                 fixed column pattern
    N_tv  = D_h U - S - N_t - N_v         row noise that changes per frame
    N_th  = D_v U - S - N_t - N_h         column noise that changes per frame
    N_vh  = D_t U - S - N_v - N_h         fixed pixel pattern (random spatial)
    N_tvh = U - S - all of the above      random spatio-temporal noise

`sigma_raw` is the RMS of each component as D'Agostino & Webb define it. Each such RMS also
holds a share of the finer components (N_v holds N_tvh / sqrt(T H), for example), so the
components are also given unbiased, as in a balanced three-way random-effects analysis of
variance (expected mean squares: e.g. Montgomery, *Design and Analysis of Experiments*, ch. 13),
with their 1-sigma statistical uncertainty (variance of a mean square 2 E[MS]^2 / dof,
propagated linearly). A component whose unbiased variance comes out negative reports 0.

In mK: each component divided by the SiTF (counts per kelvin), when given.

>>> import numpy as np
>>> rng = np.random.default_rng(0)
>>> cube = 100 + rng.normal(0, 2.0, (16, 32, 40)) + rng.normal(0, 3.0, (1, 1, 40))
>>> r = noise_3d(cube)
>>> round(r.sigma["tvh"], 1), round(r.sigma["h"], 0)
(2.0, 3.0)
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

COMPONENTS = ("t", "v", "h", "tv", "th", "vh", "tvh")


@dataclass(frozen=True)
class Noise3dResult:
    """Each component's RMS in counts: raw (D'Agostino & Webb), unbiased, its uncertainty."""

    shape: tuple[int, int, int]
    mean_counts: float
    sigma_raw: dict[str, float]
    sigma: dict[str, float]
    sigma_uncertainty: dict[str, float]
    sitf_counts_per_k: float | None = None
    conditions: dict[str, Any] = field(default_factory=dict)

    @property
    def total_temporal_counts(self) -> float:
        """sqrt(t^2 + tv^2 + th^2 + tvh^2): all the noise that changes from frame to frame."""
        return math.sqrt(sum(self.sigma[k] ** 2 for k in ("t", "tv", "th", "tvh")))

    @property
    def total_spatial_counts(self) -> float:
        """sqrt(v^2 + h^2 + vh^2): the fixed pattern."""
        return math.sqrt(sum(self.sigma[k] ** 2 for k in ("v", "h", "vh")))

    def in_mk(self, which: str = "sigma") -> dict[str, float] | None:
        """A component table converted to mK through the SiTF (None without one)."""
        if not self.sitf_counts_per_k:
            return None
        table = getattr(self, which)
        return {k: 1000.0 * v / abs(self.sitf_counts_per_k) for k, v in table.items()}

    def to_dict(self) -> dict[str, Any]:
        return {"frames": self.shape[0], "rows": self.shape[1], "cols": self.shape[2],
                "mean_counts": self.mean_counts, "sigma_counts": dict(self.sigma),
                "sigma_uncertainty_counts": dict(self.sigma_uncertainty),
                "sigma_raw_counts": dict(self.sigma_raw),
                "sigma_mk": self.in_mk("sigma"),
                "sigma_uncertainty_mk": self.in_mk("sigma_uncertainty"),
                "total_temporal_counts": self.total_temporal_counts,
                "total_spatial_counts": self.total_spatial_counts,
                "sitf_counts_per_k": self.sitf_counts_per_k, "conditions": dict(self.conditions)}


def noise_3d(stack: np.ndarray, sitf_counts_per_k: float | None = None, *,
             conditions: dict[str, Any] | None = None) -> Noise3dResult:
    """Decompose a stack (frames, rows, cols) of flat frames into the seven 3-D noise components.

    Bad pixels should be replaced or the stack cropped first: the decomposition needs a full
    rectangular cube (one hot pixel would read as fixed-pattern noise).
    """
    src = np.asarray(stack)
    if src.ndim != 3 or min(src.shape) < 2:
        raise ValueError(f"3-D noise needs a stack (frames, rows, cols) with at least 2 of each, "
                         f"got shape {src.shape}")
    n_t, n_v, n_h = src.shape
    # One pass in chunks of frames (memory stays a few frames, whatever the stack's length):
    # the directional means and the total sum of squares about a provisional level (the first
    # frame's mean, against cancellation). The components are orthogonal, so the finest one's
    # sum of squares is the total minus the others'.
    ref = float(np.mean(src[0], dtype=np.float64))
    sum_t = np.zeros(n_t)
    sum_tv = np.zeros((n_t, n_v))
    sum_th = np.zeros((n_t, n_h))
    sum_vh = np.zeros((n_v, n_h))
    ss_total = 0.0
    chunk = max(1, int(4_000_000 // (n_v * n_h)))
    for i in range(0, n_t, chunk):
        c = src[i:i + chunk].astype(np.float64) - ref
        if not np.all(np.isfinite(c)):
            raise ValueError("3-D noise: the stack holds NaN or inf; replace bad pixels first")
        sum_tv[i:i + chunk] = c.sum(axis=2)
        sum_th[i:i + chunk] = c.sum(axis=1)
        sum_t[i:i + chunk] = sum_tv[i:i + chunk].sum(axis=1)
        sum_vh += c.sum(axis=0)
        ss_total += float(np.einsum("ijk,ijk->", c, c))
    n = n_t * n_v * n_h
    s_rel = sum_t.sum() / n
    s = ref + s_rel
    m_t = sum_t / (n_v * n_h) - s_rel
    m_v = sum_vh.sum(axis=1) / (n_t * n_h) - s_rel
    m_h = sum_vh.sum(axis=0) / (n_t * n_v) - s_rel
    m_tv = sum_tv / n_h - s_rel - m_t[:, None] - m_v[None, :]
    m_th = sum_th / n_v - s_rel - m_t[:, None] - m_h[None, :]
    m_vh = sum_vh / n_t - s_rel - m_v[:, None] - m_h[None, :]
    comps = {"t": m_t, "v": m_v, "h": m_h, "tv": m_tv, "th": m_th, "vh": m_vh}
    size = {"t": n_v * n_h, "v": n_t * n_h, "h": n_t * n_v, "tv": n_h, "th": n_v, "vh": n_t,
            "tvh": 1}
    ss = {k: size[k] * float(np.sum(c * c)) for k, c in comps.items()}
    ss["tvh"] = max(ss_total - n * s_rel * s_rel - sum(ss.values()), 0.0)
    raw = {k: math.sqrt(ss[k] / n) for k in COMPONENTS}
    # Mean squares: sum of squares over the full cube / degrees of freedom.
    dof = {"t": n_t - 1, "v": n_v - 1, "h": n_h - 1, "tv": (n_t - 1) * (n_v - 1),
           "th": (n_t - 1) * (n_h - 1), "vh": (n_v - 1) * (n_h - 1),
           "tvh": (n_t - 1) * (n_v - 1) * (n_h - 1)}
    ms = {k: ss[k] / dof[k] for k in COMPONENTS}
    # E[MS] = sum of coefficient x variance component (balanced random-effects model);
    # invert for each variance component as a linear combination of mean squares.
    coef = {
        "tvh": {"tvh": 1.0},
        "tv": {"tv": 1.0 / n_h, "tvh": -1.0 / n_h},
        "th": {"th": 1.0 / n_v, "tvh": -1.0 / n_v},
        "vh": {"vh": 1.0 / n_t, "tvh": -1.0 / n_t},
        "t": {"t": 1.0 / (n_v * n_h), "tv": -1.0 / (n_v * n_h), "th": -1.0 / (n_v * n_h),
              "tvh": 1.0 / (n_v * n_h)},
        "v": {"v": 1.0 / (n_t * n_h), "tv": -1.0 / (n_t * n_h), "vh": -1.0 / (n_t * n_h),
              "tvh": 1.0 / (n_t * n_h)},
        "h": {"h": 1.0 / (n_t * n_v), "th": -1.0 / (n_t * n_v), "vh": -1.0 / (n_t * n_v),
              "tvh": 1.0 / (n_t * n_v)},
    }
    sigma: dict[str, float] = {}
    unc: dict[str, float] = {}
    for k in COMPONENTS:
        var = sum(c * ms[m] for m, c in coef[k].items())
        var_var = sum(c * c * 2.0 * ms[m] ** 2 / dof[m] for m, c in coef[k].items())
        sd = math.sqrt(max(var, 0.0))
        sigma[k] = sd
        # u(sigma) = u(var) / (2 sigma); near zero, sigma's spread is about sqrt(u(var))
        u_var = math.sqrt(var_var)
        unc[k] = u_var / (2.0 * sd) if sd > 0 and u_var < sd * sd else math.sqrt(u_var)
    return Noise3dResult(shape=(n_t, n_v, n_h), mean_counts=float(s),
                         sigma_raw={k: raw[k] for k in COMPONENTS}, sigma=sigma,
                         sigma_uncertainty=unc, sitf_counts_per_k=sitf_counts_per_k,
                         conditions=dict(conditions or {}))


def replace_bad_pixels(stack: np.ndarray, bad_pixel_mask: np.ndarray) -> np.ndarray:
    """A float copy of `stack` (frames, rows, cols) with each bad pixel replaced, frame by frame,
    by the mean of its good 8-neighbours (common practice before a 3-D noise decomposition, whose
    cube must be full); a bad pixel with no good neighbour gets the frame's good mean.
    """
    from scipy.ndimage import convolve

    s = np.asarray(stack, dtype=np.float64).copy()
    bad = np.asarray(bad_pixel_mask, dtype=bool)
    if s.ndim != 3 or bad.shape != s.shape[1:]:
        raise ValueError(f"bad-pixel mask {bad.shape} does not fit the stack {s.shape}")
    if not bad.any():
        return s
    good = (~bad).astype(np.float64)
    kernel = np.ones((3, 3))
    kernel[1, 1] = 0.0
    weight = convolve(good, kernel, mode="constant")
    rows, cols = np.nonzero(bad)
    for frame in s:
        total = convolve(frame * good, kernel, mode="constant")
        fill = np.where(weight[rows, cols] > 0,
                        total[rows, cols] / np.maximum(weight[rows, cols], 1.0),
                        frame[~bad].mean())
        frame[rows, cols] = fill
    return s
