"""MTF by the slanted-edge method (ISO 12233:2014, edge spatial frequency response, e-SFR).

Steps (ISO 12233:2014, annex D, on a linear camera, so no OECF linearisation):

1. Region of interest across one edge slanted a few degrees from a pixel axis (found
   automatically by `find_edge_roi`, or given). A near-vertical edge gives the horizontal MTF,
   a near-horizontal one (the ROI is transposed) the vertical MTF.
2. Edge location per row: centroid of the row's derivative ([-1/2, +1/2] FIR) under a Hamming
   window; a straight line fitted to the centroids (twice: the second pass windows each row on
   the first line), which gives the edge angle.
3. Every pixel projected onto the edge normal and binned at 4x oversampling (bins of 1/4 px along
   the normal; binning along the normal is ISO's binning along x with its 2014 cos(angle)
   frequency correction folded in): the oversampled edge-spread function (ESF).
4. Line-spread function (LSF): central difference of the ESF, Hamming window centred on the LSF.
5. DFT, normalised at zero frequency; divided by the transfer function of the central
   difference, sinc(2 f d) (ISO's derivative correction), and of the bins' averaging, sinc(f d)
   (not in ISO; a quarter-pixel box, 2.6 % at Nyquist), d = bin width.

Additions for real frames: dead and hot pixels are left out (a mask, plus residuals beyond
`outlier_sigma` robust sigmas of the ESF, MAD x 1.4826: common practice), and the edge line is
fitted with outlier rejection. The MTF's 1-sigma noise is propagated from the ESF's scatter
(the pixels' robust spread about the ESF, divided among the bins) through the derivative and the
windowed DFT.

Frequencies: cycles per pixel along the edge normal; cycles per mm with the pixel pitch; cycles
per mrad with the pitch and focal length (one pixel subtends pitch / focal length = IFOV).

A point-sampled edge blurred by a Gaussian of sigma 0.6 px (MTF exp(-2 pi^2 s^2 f^2), 0.169 at
Nyquist), slanted by atan(0.09) = 5.14 deg:

>>> import numpy as np
>>> from scipy.special import ndtr
>>> yy, xx = np.mgrid[:96, :64]
>>> img = 100 + 1000 * ndtr((xx - 32 - 0.09 * (yy - 48)) * np.cos(np.arctan(0.09)) / 0.6)
>>> r = slanted_edge_mtf(img)
>>> round(r.edge_angle_deg, 2), round(r.mtf_at_nyquist, 2)
(5.14, 0.17)
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

from analysis.verdicts import SpecKey, Verdict

Orientation = Literal["vertical", "horizontal"]

SPEC_KEYS = {
    "min_mtf_at_nyquist": SpecKey(
        "min_mtf_at_nyquist", "MTF at Nyquist", "", "min",
        "system MTF at 0.5 cycles/pixel by the ISO 12233 slanted edge, the lower of the "
        "horizontal and vertical edges", conditions=("field_position",)),
}


@dataclass(frozen=True)
class EdgeRoi:
    """A rectangle of the frame, in pixel indices: rows [y0, y0 + height), cols [x0, x0 + width).

    `orientation` is that of the edge inside it: "vertical" (measures the horizontal MTF) or
    "horizontal" (measures the vertical MTF).
    """

    x0: int
    y0: int
    width: int
    height: int
    orientation: Orientation

    def cut(self, image: np.ndarray) -> np.ndarray:
        return image[self.y0:self.y0 + self.height, self.x0:self.x0 + self.width]

    def to_dict(self) -> dict[str, Any]:
        return {"x0": self.x0, "y0": self.y0, "width": self.width, "height": self.height,
                "orientation": self.orientation}


@dataclass(frozen=True)
class SfrResult:
    """One edge's MTF curve and its summary figures."""

    roi: EdgeRoi
    edge_angle_deg: float
    freq_cyc_per_px: np.ndarray
    mtf: np.ndarray
    mtf_sigma: np.ndarray
    mtf_at_nyquist: float
    mtf_at_nyquist_sigma: float
    mtf50_cyc_per_px: float
    esf_distance_px: np.ndarray
    esf: np.ndarray
    edge_contrast: float
    pixels_used: int
    pixels_rejected: int
    pixel_pitch_um: float | None = None
    focal_length_mm: float | None = None
    conditions: dict[str, Any] = field(default_factory=dict)

    @property
    def mtf_direction(self) -> str:
        """Direction of the measured frequencies: across the edge."""
        return "horizontal" if self.roi.orientation == "vertical" else "vertical"

    @property
    def freq_cyc_per_mm(self) -> np.ndarray | None:
        if self.pixel_pitch_um is None:
            return None
        return self.freq_cyc_per_px / (self.pixel_pitch_um * 1e-3)

    @property
    def freq_cyc_per_mrad(self) -> np.ndarray | None:
        if self.pixel_pitch_um is None or self.focal_length_mm is None:
            return None
        return self.freq_cyc_per_px / (self.pixel_pitch_um / self.focal_length_mm)

    def mtf_at(self, f_cyc_per_px: float) -> float:
        return float(np.interp(f_cyc_per_px, self.freq_cyc_per_px, self.mtf))

    def verdict(self, limit: float, conditions: dict[str, Any] | None = None) -> Verdict:
        """Judge `min_mtf_at_nyquist` on this edge."""
        cond = {"mtf_direction": self.mtf_direction,
                "edge_angle_deg": round(self.edge_angle_deg, 3), **self.conditions,
                **(conditions or {})}
        return SPEC_KEYS["min_mtf_at_nyquist"].judge(self.mtf_at_nyquist,
                                                     self.mtf_at_nyquist_sigma, limit, cond)

    def to_dict(self) -> dict[str, Any]:
        def lst(a: np.ndarray | None) -> list[float] | None:
            return None if a is None else [round(float(x), 6) for x in a]

        return {"roi": self.roi.to_dict(), "mtf_direction": self.mtf_direction,
                "edge_angle_deg": self.edge_angle_deg, "mtf_at_nyquist": self.mtf_at_nyquist,
                "mtf_at_nyquist_sigma": self.mtf_at_nyquist_sigma,
                "mtf50_cyc_per_px": _finite(self.mtf50_cyc_per_px),
                "mtf50_cyc_per_mm": _finite(self._per_mm(self.mtf50_cyc_per_px)),
                "mtf50_cyc_per_mrad": _finite(self._per_mrad(self.mtf50_cyc_per_px)),
                "edge_contrast": self.edge_contrast, "pixels_used": self.pixels_used,
                "pixels_rejected": self.pixels_rejected,
                "pixel_pitch_um": self.pixel_pitch_um, "focal_length_mm": self.focal_length_mm,
                "freq_cyc_per_px": lst(self.freq_cyc_per_px),
                "freq_cyc_per_mm": lst(self.freq_cyc_per_mm),
                "freq_cyc_per_mrad": lst(self.freq_cyc_per_mrad),
                "mtf": lst(self.mtf), "mtf_sigma": lst(self.mtf_sigma),
                "conditions": dict(self.conditions)}

    def _per_mm(self, f: float) -> float | None:
        return None if self.pixel_pitch_um is None else f / (self.pixel_pitch_um * 1e-3)

    def _per_mrad(self, f: float) -> float | None:
        if self.pixel_pitch_um is None or self.focal_length_mm is None:
            return None
        return f / (self.pixel_pitch_um / self.focal_length_mm)


def _finite(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


# --- region of interest ----------------------------------------------------------------------

def find_edge_roi(image: np.ndarray, orientation: Orientation | None = None, *,
                  length_px: int = 128, half_width_px: int = 32) -> EdgeRoi:
    """Find the strongest straight edge and a region across it, centred on the edge.

    The frame is median-filtered (3 x 3, so single bad pixels do not count as edges); per row
    (vertical edge) or column (horizontal edge) the position of the steepest gradient is taken,
    a line is fitted to those positions with outlier rejection, and the ROI is `length_px` along
    the edge (less if the edge is shorter) by 2 `half_width_px` across, widened by the edge's
    slant so the edge stays inside with `half_width_px` to spare on both sides.
    """
    from scipy.ndimage import median_filter

    img = np.asarray(image, dtype=np.float64)
    if img.ndim != 2:
        raise ValueError(f"MTF: expected one frame (rows, cols), got shape {img.shape}")
    finite = np.isfinite(img)
    if not finite.all():                       # NaN for pixels a correction left out
        img = np.where(finite, img, np.median(img[finite]) if finite.any() else 0.0)
    sm = median_filter(img, size=3, mode="nearest")
    gy, gx = np.gradient(sm)
    if orientation is None:
        orientation = "vertical" if np.sum(np.abs(gx)) >= np.sum(np.abs(gy)) else "horizontal"
    if orientation not in ("vertical", "horizontal"):
        raise ValueError(f"orientation must be 'vertical' or 'horizontal', not {orientation!r}")
    g = np.abs(gx) if orientation == "vertical" else np.abs(gy).T
    n_lines, n_across = g.shape
    peak = g.max(axis=1)
    noise = 1.4826 * float(np.median(np.abs(g - np.median(g))))
    strong = (peak > 0.5 * np.percentile(peak, 90)) & (peak > 10.0 * noise)
    if strong.sum() < 8:
        raise ValueError("MTF: no straight edge found in the frame (fewer than 8 lines cross "
                         "one); check the target is the slanted edge and it is lit")
    lines = np.flatnonzero(strong)
    pos = np.argmax(g[lines], axis=1).astype(float)
    keep = np.ones(len(lines), dtype=bool)
    for _ in range(5):
        coef = np.polyfit(lines[keep], pos[keep], 1)
        resid = pos - np.polyval(coef, lines)
        new = np.abs(resid) < max(3.0, 4.0 * 1.4826 * np.median(np.abs(resid[keep])))
        if np.array_equal(new, keep):
            break
        keep = new
    if keep.sum() < max(8, 0.5 * len(lines)):
        raise ValueError("MTF: no straight edge found in the frame (the steepest points of the "
                         "lines do not fall on one line); check the target is the slanted edge")
    used = lines[keep]
    lo_line, hi_line = int(used.min()), int(used.max()) + 1
    length = min(int(length_px), hi_line - lo_line)
    if length < 16:
        raise ValueError(f"MTF: the edge is only {length} px long; at least 16 px needed")
    mid = (lo_line + hi_line) // 2
    start = max(lo_line, min(mid - length // 2, hi_line - length))
    centre_line = start + length / 2.0
    slant = abs(coef[0]) * length / 2.0
    half = int(math.ceil(half_width_px + slant))
    centre = float(np.polyval(coef, centre_line))
    a0 = int(round(centre)) - half
    a0 = max(0, a0)
    a1 = min(n_across, int(round(centre)) + half)
    if a1 - a0 < 16:
        raise ValueError("MTF: the edge is too close to the frame border for a region across it")
    if orientation == "vertical":
        return EdgeRoi(a0, start, a1 - a0, length, "vertical")
    return EdgeRoi(start, a0, length, a1 - a0, "horizontal")


# --- e-SFR --------------------------------------------------------------------------------------

def _hamming(n: int, centre: float, half: float) -> np.ndarray:
    x = (np.arange(n) - centre) / half
    return np.where(np.abs(x) <= 1.0, 0.54 + 0.46 * np.cos(math.pi * x), 0.08)


def _edge_line(roi: np.ndarray, bad: np.ndarray) -> tuple[float, float, float]:
    """Fit ``x_edge = a + b row`` to per-row derivative centroids; returns (a, b, polarity)."""
    from scipy.ndimage import median_filter

    sm = median_filter(np.where(bad, np.nan, roi), size=3, mode="nearest")
    sm = np.where(np.isnan(sm), median_filter(roi, size=3, mode="nearest"), sm)
    deriv = np.zeros_like(sm)
    deriv[:, 1:] = sm[:, 1:] - sm[:, :-1]            # [-1/2, +1/2] FIR up to a factor 2
    polarity = 1.0 if np.sum(deriv) >= 0 else -1.0
    deriv *= polarity
    rows, cols = roi.shape
    x = np.arange(cols) - 0.5                          # the difference sits between pixels
    y = np.arange(rows, dtype=float)
    centre = np.full(rows, (cols - 1) / 2.0)
    coef = np.array([0.0, centre[0]])
    for _ in range(2):
        w = np.stack([_hamming(cols, c, cols / 2.0) for c in centre])
        d = np.clip(deriv, 0.0, None) * w
        s = d.sum(axis=1)
        ok = s > 0
        cent = (d * x[None, :]).sum(axis=1)[ok] / s[ok]
        yy = y[ok]
        keep = np.ones(len(yy), dtype=bool)
        for _ in range(4):
            coef = np.polyfit(yy[keep], cent[keep], 1)
            res = cent - np.polyval(coef, yy)
            mad = 1.4826 * np.median(np.abs(res[keep]))
            new = np.abs(res) <= max(4.0 * mad, 0.05)
            if np.array_equal(new, keep) or new.sum() < 4:
                break
            keep = new
        centre = np.polyval(coef, y)
    return float(coef[1]), float(coef[0]), polarity


def slanted_edge_mtf(image: np.ndarray, roi: EdgeRoi | None = None, *,
                     orientation: Orientation | None = None, oversample: int = 4,
                     bad_pixel_mask: np.ndarray | None = None, outlier_sigma: float = 8.0,
                     pixel_pitch_um: float | None = None, focal_length_mm: float | None = None,
                     max_freq_cyc_per_px: float = 1.0, method_sigma: float = 0.005,
                     conditions: dict[str, Any] | None = None) -> SfrResult:
    """MTF across one slanted edge of `image` (rows, cols) by ISO 12233:2014 e-SFR.

    `roi` None finds one (`find_edge_roi`, optionally of the given `orientation`). A
    `bad_pixel_mask` (True = bad, same shape as the image) leaves those pixels out.
    `mtf_sigma` is the noise alone; the uncertainty at Nyquist adds `method_sigma` in quadrature,
    the method's own spread on noise-free simulated edges of known MTF at 2-10 degrees (below
    0.005 in tests/analysis/test_mtf.py).
    """
    img = np.asarray(image, dtype=np.float64)
    if img.ndim == 3:
        img = img.mean(axis=0)                          # a stack: its mean frame
    if roi is None:
        roi = find_edge_roi(img, orientation)
    cut = roi.cut(img)
    bad = (np.zeros(cut.shape, dtype=bool) if bad_pixel_mask is None
           else roi.cut(np.asarray(bad_pixel_mask, dtype=bool)))
    if not np.all(np.isfinite(cut)):
        bad = bad | ~np.isfinite(cut)
        cut = np.where(np.isfinite(cut), cut, 0.0)
    if roi.orientation == "horizontal":
        cut, bad = cut.T, bad.T
    rows, cols = cut.shape
    a, b, polarity = _edge_line(cut, bad)
    angle = math.atan(b)
    if abs(math.degrees(angle)) < 1.0 or rows * abs(b) < 2.0:
        raise ValueError(f"MTF: the edge is slanted only {math.degrees(angle):.2f} deg over "
                         f"{rows} lines; the slanted-edge method needs the edge to cross at "
                         "least 2 pixels along the region (ISO 12233 uses about 5 deg)")
    cos_a = math.cos(angle)
    yy, xx = np.mgrid[:rows, :cols]
    dist = ((xx - (a + b * yy)) * cos_a * polarity).ravel()   # along the normal, to bright
    vals = cut.ravel()
    good = ~bad.ravel()
    # keep distances that every row reaches (the ROI's slanted border would bias the ESF ends)
    reach = (min(a, a + b * (rows - 1)), max(a, a + b * (rows - 1)))
    span = min(reach[0], cols - 1 - reach[1]) * cos_a
    if span < 6:
        raise ValueError(f"MTF: the edge leaves only {span:.1f} px on one side of the region; "
                         "centre the region on the edge or widen it")
    step = 1.0 / oversample
    n_half = int(span / step)
    inside = good & (np.abs(dist) <= n_half * step)
    esf, counts, centres = _bin(dist[inside], vals[inside], step, n_half)
    # reject pixels far off the ESF (bad pixels not in the mask), then bin again
    # Allowed residual: outlier_sigma robust sigmas, plus the ESF's change over one bin (the
    # steep part of a clean edge), plus 1 % of the contrast (a deviation below that hardly
    # moves the MTF).
    resid = vals - np.interp(dist, centres, esf)
    scale = 1.4826 * np.median(np.abs(resid[inside]))
    slope = np.abs(np.interp(dist, centres, np.gradient(esf)))
    contrast0 = abs(esf[-3:].mean() - esf[:3].mean())
    outlier = np.abs(resid) > outlier_sigma * scale + slope + 0.01 * contrast0
    rejected = int((inside & outlier).sum())
    if rejected:
        inside = inside & ~outlier
        esf, counts, centres = _bin(dist[inside], vals[inside], step, n_half)
    scatter = float(1.4826 * np.median(np.abs((vals - np.interp(dist, centres, esf))[inside])))
    lsf = np.zeros_like(esf)
    lsf[1:-1] = 0.5 * (esf[2:] - esf[:-2])
    var_bin = scatter ** 2 / np.maximum(counts, 1)
    n = len(lsf)
    peak = float(np.sum(np.arange(n) * np.abs(lsf)) / np.sum(np.abs(lsf)))
    win = _hamming(n, peak, max(peak, n - 1 - peak))
    spec = np.fft.rfft(lsf * win)
    f = np.fft.rfftfreq(n, d=step)                     # cycles per pixel along the normal
    dc = abs(spec[0])
    if dc == 0:
        raise ValueError("MTF: the edge has no contrast in the region")
    mtf = np.abs(spec) / dc
    # Noise of the MTF: white bin noise through the central difference has the spectrum
    # var x sin^2(2 pi f d); the magnitude feels the half in phase with the signal.
    sigma = np.sqrt(0.5 * np.sum(win ** 2 * var_bin) * np.sin(2 * math.pi * f * step) ** 2) / dc
    corr = np.sinc(2.0 * f * step) * np.sinc(f * step)
    sel = f <= max_freq_cyc_per_px + 1e-12
    f, mtf, sigma, corr = f[sel], mtf[sel], sigma[sel], corr[sel]
    mtf = mtf / corr
    sigma = sigma / corr
    contrast = float(abs(esf[-3:].mean() - esf[:3].mean()))
    mtf_nyq = float(np.interp(0.5, f, mtf))
    sig_nyq = math.hypot(float(np.interp(0.5, f, sigma)), method_sigma)
    cond = {"oversample": oversample, "roi": roi.to_dict(),
            "edge_angle_deg": round(math.degrees(angle), 4), **(conditions or {})}
    return SfrResult(roi=roi, edge_angle_deg=math.degrees(angle), freq_cyc_per_px=f, mtf=mtf,
                     mtf_sigma=sigma, mtf_at_nyquist=mtf_nyq, mtf_at_nyquist_sigma=sig_nyq,
                     mtf50_cyc_per_px=_crossing(f, mtf, 0.5), esf_distance_px=centres,
                     esf=esf, edge_contrast=contrast, pixels_used=int(inside.sum()),
                     pixels_rejected=rejected, pixel_pitch_um=pixel_pitch_um,
                     focal_length_mm=focal_length_mm, conditions=cond)


def _bin(dist: np.ndarray, vals: np.ndarray, step: float, n_half: int
         ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Mean value per bin of width `step` centred on k step, k = -n_half .. n_half; empty bins
    are filled by linear interpolation between their neighbours."""
    idx = np.rint(dist / step).astype(int) + n_half
    n = 2 * n_half + 1
    ok = (idx >= 0) & (idx < n)
    counts = np.bincount(idx[ok], minlength=n).astype(float)
    sums = np.bincount(idx[ok], weights=vals[ok], minlength=n)
    centres = (np.arange(n) - n_half) * step
    filled = counts > 0
    if filled.sum() < 4:
        raise ValueError("MTF: too few pixels near the edge to build the edge-spread function")
    esf = np.interp(centres, centres[filled], sums[filled] / counts[filled])
    return esf, counts, centres


def _crossing(f: np.ndarray, mtf: np.ndarray, level: float) -> float:
    """First frequency where the MTF falls to `level` (linear interpolation); NaN if never."""
    below = np.flatnonzero(mtf < level)
    if not len(below) or below[0] == 0:
        return float("nan")
    i = below[0]
    f0, f1, m0, m1 = f[i - 1], f[i], mtf[i - 1], mtf[i]
    return float(f0 + (m0 - level) * (f1 - f0) / (m0 - m1))


def judge_min_mtf_at_nyquist(results: list[SfrResult], limit: float,
                             conditions: dict[str, Any] | None = None) -> Verdict:
    """`min_mtf_at_nyquist` judged on the worst edge measured (horizontal, vertical, through
    the field): the spec holds only if every direction and position meets it."""
    if not results:
        raise ValueError("MTF: no edge measured; nothing to judge")
    worst = min(results, key=lambda r: r.mtf_at_nyquist)
    cond = {"edges_measured": len(results),
            "worst_edge": {"mtf_direction": worst.mtf_direction,
                           "roi": worst.roi.to_dict(), **worst.conditions},
            **(conditions or {})}
    return SPEC_KEYS["min_mtf_at_nyquist"].judge(worst.mtf_at_nyquist,
                                                 worst.mtf_at_nyquist_sigma, limit, cond)
