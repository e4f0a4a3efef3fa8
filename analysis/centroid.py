"""Spot detection and sub-pixel centroids with a per-spot uncertainty.

Axis order: images are numpy arrays indexed [row, col]; every position this module returns
is (x, y) = (column, row) in pixels, with the centre of pixel [0, 0] at (0, 0).

Methods (published):
- Robust background: median and the median absolute deviation scaled by 1.4826 (the MAD is a
  consistent estimator of a Gaussian sigma; Rousseeuw & Croux, JASA 88:1273, 1993), iterated
  with 3-sigma clipping (common practice in astronomical source extraction).
- Detection: threshold of a matched-filter (Gaussian-smoothed) image in units of its own noise,
  8-connected components by union-find labelling of the foreground's runs (Rosenfeld &
  Pfaltz 1966; common practice in source extraction). Smoothing and labelling are plain numpy
  (analysis.image_filters), and so is the normal CDF of the Gaussian fit (analysis.normal_cdf):
  this module imports no scipy, whose import alone costs more than analysing a frame.
- Centre of mass: background-subtracted, in a square window re-centred until it stops moving;
  its variance is the noise propagated through the first moment (e.g. Auer & van Altena,
  AJ 83:531, 1978; Thomas, Fusco et al., MNRAS 371:323, 2006).
- Gaussian fit: least squares of a pixel-integrated 2D Gaussian plus a constant, which is the
  maximum-likelihood estimate in Gaussian noise and reaches the Cramer-Rao bound
  (Winick, JOSA A 3:1809, 1986; Mendez, Silva & Lobos, PASP 125:580, 2013). Its variance is
  the inverse Fisher information evaluated at the fit. The window spans +/-3.5 fitted spot
  sigmas; its first guess comes from noise-corrected second moments of the spots.
"""

from __future__ import annotations

import enum
import functools
import math
from dataclasses import dataclass, replace

import numpy as np
from analysis.fast_median import median as _median
from analysis.image_filters import bilinear, gaussian_smooth, label_sparse, maximum_3x3
from analysis.normal_cdf import ndtr

__all__ = [
    "Background",
    "Spot",
    "SpotFlag",
    "estimate_background",
    "detect_spots",
    "centroid_at",
    "repair_isolated_pixels",
]

_MAD_TO_SIGMA = 1.4826  # 1 / Phi^-1(3/4): MAD -> sigma for Gaussian data.
_REPAIR_K_SIGMA = 10.0  # hot/dead pixel candidates: this many noise sigmas from the background


class SpotFlag(enum.Flag):
    """Conditions that make a centroid less trustworthy."""

    NONE = 0
    SATURATED = enum.auto()  # a pixel in the window reached the saturation level
    TRUNCATED = enum.auto()  # the window crosses the frame edge
    MERGED = enum.auto()  # two peaks in one component, or a component too large for one spot
    NOT_CONVERGED = enum.auto()  # the centre kept moving or the fit failed
    BAD_PIXEL = enum.auto()  # a repaired hot/dead pixel in the window (centre of mass) or core (fit)


@dataclass(frozen=True)
class Background:
    """Robust background: level (scalar or per-pixel map) and per-pixel noise sigma (DN)."""

    level: float | np.ndarray
    noise: float


@dataclass(frozen=True)
class Spot:
    """One centroid. Positions (x, y) = (column, row) in pixels; sigmas are 1-sigma (px).

    flux: background-subtracted signal in the window (DN); peak: brightest background-subtracted
    pixel (DN); snr: flux over its own noise in the window.
    """

    x: float
    y: float
    sigma_x: float
    sigma_y: float
    flux: float
    peak: float
    snr: float
    flags: SpotFlag = SpotFlag.NONE

    @property
    def ok(self) -> bool:
        """True when no flag is raised."""
        return self.flags == SpotFlag.NONE


def _clipped_stats(values: np.ndarray, clip: float = 3.0, iterations: int = 3) -> tuple[float, float]:
    """Median and MAD-sigma with iterative sigma clipping.

    One sort serves every iteration: each clipped set is a run of the sorted values, so its
    median is read off and its MAD is a selection from two sorted runs (the deviations left
    and right of the median), as np.median would give them.
    """
    v = np.sort(np.asarray(values, dtype=np.float64).ravel())
    if v.size == 0:
        raise ValueError("no pixels to estimate a background from: the image (or tile) is empty")
    lo, hi = 0, v.size
    med = _sorted_median(v, lo, hi)
    sig = _MAD_TO_SIGMA * _sorted_mad(v, lo, hi, med)
    for _ in range(iterations):
        if sig <= 0:
            break
        # |v - med| < clip * sig is a run of the sorted values; the boundary tests use the same
        # arithmetic as the elementwise test.
        band = clip * sig
        new_lo = int(np.searchsorted(v, med - band, side="left"))
        new_hi = int(np.searchsorted(v, med + band, side="right"))
        while new_lo < hi and not abs(v[new_lo] - med) < band:
            new_lo += 1
        while new_lo > lo and abs(v[new_lo - 1] - med) < band:
            new_lo -= 1
        while new_hi > new_lo and not abs(v[new_hi - 1] - med) < band:
            new_hi -= 1
        while new_hi < hi and abs(v[new_hi] - med) < band:
            new_hi += 1
        new_lo, new_hi = max(new_lo, lo), min(new_hi, hi)
        if (new_lo, new_hi) == (lo, hi):
            break
        lo, hi = new_lo, new_hi
        if hi <= lo:
            return med, sig
        med = _sorted_median(v, lo, hi)
        sig = _MAD_TO_SIGMA * _sorted_mad(v, lo, hi, med)
    return med, sig


def _sorted_median(v: np.ndarray, lo: int, hi: int) -> float:
    """Median of the sorted run v[lo:hi] (mean of the middle two for an even count)."""
    n = hi - lo
    mid = lo + n // 2
    if n % 2:
        return float(v[mid])
    return float((v[mid - 1] + v[mid]) / 2.0)


def _sorted_mad(v: np.ndarray, lo: int, hi: int, med: float) -> float:
    """Median of |v - med| over the sorted run v[lo:hi], without sorting the deviations.

    The deviations form two ascending runs, v[j:hi] - med and med - v[j-1::-1] (j: first value
    >= med); the k-th smallest of their union comes from a binary search on how many are taken
    from the right run (the classic selection from two sorted arrays).
    """
    n = hi - lo
    j = int(np.searchsorted(v[lo:hi], med, side="left")) + lo
    n_right, n_left = hi - j, j - lo

    def right(i: int) -> float:  # i-th smallest deviation on the right
        return float(v[j + i] - med)

    def left(i: int) -> float:
        return float(med - v[j - 1 - i])

    def kth(k: int) -> float:  # 0-based
        a_lo, a_hi = max(0, k + 1 - n_left), min(k + 1, n_right)
        while a_lo < a_hi:  # a: how many of the k+1 smallest come from the right run
            a = (a_lo + a_hi) // 2
            b = k + 1 - a
            if b > 0 and left(b - 1) > right(a):
                a_lo = a + 1
            else:
                a_hi = a
        a = a_lo
        b = k + 1 - a
        return max(right(a - 1) if a > 0 else -math.inf, left(b - 1) if b > 0 else -math.inf)

    if n % 2:
        return kth(n // 2)
    return (kth(n // 2 - 1) + kth(n // 2)) / 2.0


def estimate_background(image: np.ndarray, *, tile_px: int | None = None) -> Background:
    """Robust background level and noise of an image (sigma-clipped median and MAD).

    With tile_px the level is a map: one clipped median per tile, bilinearly interpolated
    between tile centres (for a background that drifts across the frame). The noise is one
    figure for the frame. Large frames are subsampled on a regular lattice (about 20 000
    pixels) for the global statistics: the MAD-sigma of that many samples is good to ~1 %.
    """
    img = _as_float_image(image)
    step = max(1, int(math.sqrt(img.size / 20_000)))
    sample = img[::step, ::step]
    level, noise = _clipped_stats(sample.ravel())
    if noise <= 0:
        # A perfectly flat (noise-free) frame: fall back to the plain standard deviation so the
        # thresholds stay finite; zero noise would flag every pixel as signal.
        noise = float(np.std(sample)) or 1e-12
    if tile_px is None:
        return Background(level=level, noise=noise)
    h, w = img.shape
    ny, nx = max(1, h // tile_px), max(1, w // tile_px)
    ys = np.linspace(0, h, ny + 1).astype(int)
    xs = np.linspace(0, w, nx + 1).astype(int)
    grid = np.empty((ny, nx))
    for i in range(ny):
        for j in range(nx):
            grid[i, j] = _clipped_stats(img[ys[i]:ys[i + 1], xs[j]:xs[j + 1]].ravel())[0]
    cy = 0.5 * (ys[:-1] + ys[1:]) - 0.5
    cx = 0.5 * (xs[:-1] + xs[1:]) - 0.5
    rows = np.array([np.interp(np.arange(w), cx, grid[i]) for i in range(ny)])
    level_map = np.array([np.interp(np.arange(h), cy, rows[:, j]) for j in range(w)]).T
    return Background(level=level_map, noise=noise)


def _as_float_image(image: np.ndarray) -> np.ndarray:
    arr = np.asarray(image)
    if arr.ndim != 2:
        raise ValueError(
            f"expected a single 2-D frame (rows, cols), got an array of shape {arr.shape}; "
            "average a stack along its first axis before finding spots"
        )
    return arr.astype(np.float64, copy=False)


def _centroid_com_batch(
    resid: np.ndarray, noise: float, xs: np.ndarray, ys: np.ndarray, window_px: int,
    gain: float | None, max_iter: int = 20, tol: float = 1e-3,
) -> tuple[np.ndarray, ...]:
    """Iterated windowed centre of mass of many spots at once on a background-subtracted image.

    The window is a square of side window_px centred on the current estimate, with fractional
    weights for the pixels it cuts (so the estimate moves continuously); it is re-centred until
    no centre moves more than tol px. Returns x, y, sigma_x, sigma_y, flux, snr, converged,
    truncated (arrays).
    """
    h_img, w_img = resid.shape
    half = window_px / 2.0
    m = window_px + 2
    pad = m
    padded = np.pad(resid, pad)  # zeros outside the frame: no signal, flagged as truncated
    ar = np.arange(m)
    x = xs.astype(float).copy()
    y = ys.astype(float).copy()
    active = np.ones(x.size, dtype=bool)
    converged = np.zeros(x.size, dtype=bool)

    def window(xc: np.ndarray, yc: np.ndarray) -> tuple[np.ndarray, ...]:
        x0 = np.floor(xc - half + 0.5).astype(int)
        y0 = np.floor(yc - half + 0.5).astype(int)
        x0 = _clip(x0, -pad, w_img - 1)
        y0 = _clip(y0, -pad, h_img - 1)
        px = x0[:, None] + ar[None, :]
        py = y0[:, None] + ar[None, :]
        cut = padded[(py + pad)[:, :, None], (px + pad)[:, None, :]]
        wx = _clip(np.minimum(px + 0.5, xc[:, None] + half) - np.maximum(px - 0.5, xc[:, None] - half), 0, 1)
        wy = _clip(np.minimum(py + 0.5, yc[:, None] + half) - np.maximum(py - 0.5, yc[:, None] - half), 0, 1)
        return cut, wx, wy, px, py

    for _ in range(max_iter):
        if not active.any():
            break
        idx = np.nonzero(active)[0]
        cut, wx, wy, px, py = window(x[idx], y[idx])
        wc = cut * wy[:, :, None] * wx[:, None, :]
        flux = wc.sum(axis=(1, 2))
        good = flux > 0
        safe = np.where(good, flux, 1.0)
        nx = np.where(good, (wc.sum(axis=1) * px).sum(axis=1) / safe, x[idx])
        ny = np.where(good, (wc.sum(axis=2) * py).sum(axis=1) / safe, y[idx])
        moved = np.hypot(nx - x[idx], ny - y[idx])
        x[idx], y[idx] = nx, ny
        done = (moved < tol) & good
        converged[idx[done]] = True
        active[idx[done | ~good]] = False
    cut, wx, wy, px, py = window(x, y)
    wgt = wy[:, :, None] * wx[:, None, :]
    flux = (cut * wgt).sum(axis=(1, 2))
    var = np.full(cut.shape, noise * noise)
    if gain:
        var = var + _clip(cut, 0, None) / gain
    w2v = wgt * wgt * var
    dx = px - x[:, None]
    dy = py - y[:, None]
    pos = flux > 0
    safe = np.where(pos, flux, 1.0)
    sx = np.where(pos, np.sqrt((w2v * (dx * dx)[:, None, :]).sum(axis=(1, 2))) / safe, np.inf)
    sy = np.where(pos, np.sqrt((w2v * (dy * dy)[:, :, None]).sum(axis=(1, 2))) / safe, np.inf)
    noise_flux = np.sqrt(w2v.sum(axis=(1, 2)))
    snr = np.divide(flux, noise_flux, out=np.zeros_like(flux), where=pos & (noise_flux > 0))
    truncated = (x - half < -0.5) | (y - half < -0.5) | (x + half > w_img - 0.5) | (y + half > h_img - 0.5)
    return x, y, sx, sy, flux, snr, converged & pos, truncated


_INV_SQRT_2PI = 1.0 / math.sqrt(2.0 * math.pi)


def _window_index(shape: tuple[int, int], rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """Flat indices (n, m, m) of the windows rows (n, m) x cols (n, m), clipped into the frame."""
    h, w = shape
    return (_clip(rows, 0, h - 1) * w)[:, :, None] + _clip(cols, 0, w - 1)[:, None, :]


def _gather(img: np.ndarray, index: np.ndarray) -> np.ndarray:
    """img at flat indices (one 1-D gather: much cheaper than 2-D fancy indexing)."""
    flat = img.ravel() if img.flags.c_contiguous else np.ascontiguousarray(img).ravel()
    return flat[index]


def _clip(a: np.ndarray, lo: np.ndarray | float | None, hi: np.ndarray | float | None) -> np.ndarray:
    """np.clip without its dispatch overhead (it dominates on the small arrays of a fit)."""
    if lo is not None:
        a = np.maximum(a, lo)
    if hi is not None:
        a = np.minimum(a, hi)
    return a


def _edge_pieces(centre: np.ndarray, sigma: np.ndarray, start: np.ndarray, size: int) -> tuple[np.ndarray, ...]:
    """Pixel fractions of 1-D Gaussians (..., size) and their derivatives by centre and sigma.

    centre, sigma, start: arrays of one shape (here (N, 2): x and y of N spots together).
    Pixel k covers [start + k - 0.5, start + k + 0.5]; fraction = Phi(z_k+1) - Phi(z_k).
    """
    inv_s = (1.0 / sigma)[..., None]
    z = (start - centre)[..., None] + _edge_offsets(size)
    z *= inv_s
    pdf = z * z
    pdf *= -0.5
    np.exp(pdf, out=pdf)
    pdf *= _INV_SQRT_2PI
    cdf = ndtr(z, pdf)
    frac = cdf[..., 1:] - cdf[..., :-1]
    d_centre = pdf[..., :-1] - pdf[..., 1:]
    d_centre *= inv_s
    z *= pdf
    d_sigma = z[..., :-1] - z[..., 1:]
    d_sigma *= inv_s
    return frac, d_centre, d_sigma


@functools.cache
def _edge_offsets(size: int) -> np.ndarray:
    """Pixel edges -0.5, 0.5, ..., size - 0.5 relative to a window's first pixel centre."""
    out = np.arange(size + 1) - 0.5
    out.setflags(write=False)
    return out


@dataclass(frozen=True)
class _Windows:
    """Square windows of m pixels around many seeds: data, pixel weights (1 = used, 0 = left
    out), first column x0 and row y0 of each, and whether each crosses the frame edge."""

    x0: np.ndarray
    y0: np.ndarray
    rows: np.ndarray
    cols: np.ndarray
    data: np.ndarray
    wgt: np.ndarray
    use: np.ndarray
    truncated: np.ndarray


def _fit_windows(resid: np.ndarray, xs: np.ndarray, ys: np.ndarray, m: int, mask: np.ndarray | None,
                 raw: np.ndarray | None, saturation: float | None) -> _Windows:
    """Windows of side m centred on round(xs, ys); pixels outside the frame, in mask, repaired
    (-inf in raw) or saturated (raw >= saturation) are left out."""
    h_img, w_img = resid.shape
    half = m // 2
    x0 = np.rint(xs).astype(int) - half
    y0 = np.rint(ys).astype(int) - half
    ar = np.arange(m)
    cols = x0[:, None] + ar[None, :]
    rows = y0[:, None] + ar[None, :]
    inside_c = (cols >= 0) & (cols < w_img)
    inside_r = (rows >= 0) & (rows < h_img)
    index = _window_index(resid.shape, rows, cols)
    data = _gather(resid, index)
    use = inside_r[:, :, None] & inside_c[:, None, :]
    truncated = ~use.all(axis=(1, 2))
    if mask is not None:
        use &= ~_gather(mask, index)
    if raw is not None:  # leave out repaired (-inf) and saturated pixels of the raw frame
        raw_win = _gather_raw(raw, index)
        use &= np.isfinite(raw_win)
        if saturation is not None:
            use &= raw_win < saturation
    wgt = use.astype(float)
    data = np.where(use, data, 0.0)
    return _Windows(x0, y0, rows, cols, data, wgt, use, truncated)


def _moment_start(win: _Windows, noise: float, m: int, s0: np.ndarray | None) -> np.ndarray:
    """Start (flux, x, y, sx, sy, b) of the fits: background from the window's border, centre
    and (unless s0 is given) sigma from the moments of the positive excess."""
    data, wgt = win.data, win.wgt
    n = data.shape[0]
    # The four sides of the border (its corners counted twice, as two sides hold them).
    bsum = data[:, 0].sum(1) + data[:, -1].sum(1) + data[:, :, 0].sum(1) + data[:, :, -1].sum(1)
    bcnt = wgt[:, 0].sum(1) + wgt[:, -1].sum(1) + wgt[:, :, 0].sum(1) + wgt[:, :, -1].sum(1)
    b = np.where(bcnt > 0, bsum / np.maximum(bcnt, 1), 0.0)
    b = _clip(b, -3 * noise, 3 * noise)
    excess = data - b[:, None, None]
    excess *= wgt
    pos = np.maximum(excess, 0.0)  # wgt is 0 or 1: the clipped excess of the used pixels
    col_prof = pos.sum(axis=1)
    tot = np.maximum(col_prof.sum(1), 1e-12)
    px = (col_prof * win.cols).sum(1) / tot
    py = (pos.sum(axis=2) * win.rows).sum(1) / tot
    if s0 is None:
        s0 = np.sqrt(np.maximum((col_prof * (win.cols - px[:, None]) ** 2).sum(1) / tot - 1 / 12, 0.09))
    s0 = _clip(np.broadcast_to(np.asarray(s0, float), (n,)), 0.3, m / 3.0)
    x0, y0 = win.x0, win.y0
    return np.column_stack([np.maximum(excess.sum(axis=(1, 2)), 1e-9),
                            _clip(px, x0 - 0.5, x0 + m - 0.5), _clip(py, y0 - 0.5, y0 + m - 0.5),
                            s0, s0, b])


def _gauss_fit_batch(
    resid: np.ndarray, noise: float, xs: np.ndarray, ys: np.ndarray, window_px: int,
    gain: float | None, s0: np.ndarray | None = None, mask: np.ndarray | None = None,
    max_iter: int = 20, raw: np.ndarray | None = None, saturation: float | None = None,
    tol: float = 1e-4, covariance: bool = True, p0: np.ndarray | None = None,
) -> tuple[np.ndarray, ...]:
    """Pixel-integrated Gaussian fits of many spots at once (Levenberg-Marquardt, per spot).

    Model per window: flux * ey (x) ex + b, ex/ey the pixel-integrated 1-D Gaussians (erf
    differences), six parameters (flux, x, y, sx, sy, b): the maximum-likelihood estimate in
    Gaussian noise (Winick 1986). mask: pixels to leave out, True = out; raw (with saturation):
    the raw frame, whose repaired (-inf) and saturated pixels are left out.
    Windows are centred on round(xs, ys); pixels outside the frame are left out and flagged.
    Returns x, y, sigma_x, sigma_y, flux, snr, converged, truncated, fitted spot sigma (arrays)
    and the fitted parameters (n, 6); p0 (n, 6) replaces the moment start.
    A well-posed spot converges in 4-8 iterations from the moment start; max_iter only bounds
    the ill-posed ones (core pixel left out, spot at the window edge), which stay flagged
    NOT_CONVERGED whatever the cap. covariance=False skips the uncertainties (sigma_x, sigma_y
    and snr come back NaN) for callers that only need the fitted shape.
    """
    n = xs.size
    m = int(window_px) | 1
    win = _fit_windows(resid, xs, ys, m, mask, raw, saturation)
    x0, y0, data, wgt, use, truncated = win.x0, win.y0, win.data, win.wgt, win.use, win.truncated
    if p0 is None:
        p = _moment_start(win, noise, m, s0)
    else:  # a given start, held inside this window's bounds
        p = np.array(p0, dtype=float)
        p[:, 1] = _clip(p[:, 1], x0 - 0.5, x0 + m - 0.5)
        p[:, 2] = _clip(p[:, 2], y0 - 0.5, y0 + m - 0.5)
        p[:, 3:5] = _clip(p[:, 3:5], 0.3, m / 3.0)
        p[:, 0] = np.maximum(p[:, 0], 1e-9)
    lo = np.column_stack([np.full(n, 1e-12), x0 - 0.5, y0 - 0.5, np.full(n, 0.15), np.full(n, 0.15), np.full(n, -np.inf)])
    hi = np.column_stack([np.full(n, np.inf), x0 + m - 0.5, y0 + m - 0.5, np.full(n, float(m)), np.full(n, float(m)), np.full(n, np.inf)])
    start = np.column_stack([x0, y0]).astype(float)

    full = ~use.all(axis=(1, 2))  # windows with pixels left out: not separable
    model, UV = _SubBatch(p, start, m).model_uv()
    res = (data - model) * wgt
    cost = (res * res).sum(axis=(1, 2))
    lam = np.full(n, 1e-3)
    active = np.ones(n, dtype=bool)
    converged = np.zeros(n, dtype=bool)
    lo_in, hi_in = lo + 1e-9, hi - 1e-9
    # The undamped J^T J of each spot where its fit ended by a small step: the Fisher
    # information there (unit weights), so the covariance needs no further evaluation.
    fisher = np.empty((n, 6, 6)) if covariance and not gain else None
    have_fisher = np.zeros(n, dtype=bool)
    for _it in range(max_iter):
        if not active.any():
            break
        idx = np.nonzero(active)[0]
        sel = slice(None) if idx.size == n else idx  # views, not copies, while all are active
        A, g = _normal_equations(UV[sel], res[sel], wgt[sel], full[sel])
        if fisher is not None:
            fisher[sel] = A
        diag = np.einsum("nii->ni", A)  # a view on the diagonal: A is damped in place
        diag *= 1.0 + lam[sel, None]
        try:
            step = np.linalg.solve(A, g[:, :, None])[:, :, 0]
        except np.linalg.LinAlgError:
            step = np.stack([np.linalg.lstsq(a, v, rcond=None)[0] for a, v in zip(A, g)])
        trial = np.minimum(np.maximum(p[sel] + step, lo_in[sel]), hi_in[sel])
        # Converged when the step moves the centre by less than tol = 1e-4 px (a small fraction
        # of any centroid uncertainty) and the flux by less than tol of itself. Near the minimum
        # a Gauss-Newton step is the distance left to it (and the next one quadratically
        # smaller), so a step that small is taken without evaluating the model there.
        moved = np.abs(trial - p[sel])
        small = (moved[:, 1] < tol) & (moved[:, 2] < tol) & (moved[:, 0] < tol * trial[:, 0] + 1e-9)
        if small.any():
            done = idx[small]
            p[done] = trial[small]
            converged[done] = True
            active[done] = False
            have_fisher[done] = True
            if small.all():
                continue
            idx, trial = idx[~small], trial[~small]
            sel = idx
        # The trial's Jacobian factors come with its model (they share the erf pieces) and are
        # kept when the step is taken: one evaluation per iteration.
        t_model, t_UV = _SubBatch(trial, start[sel], m).model_uv()
        t_res = (data[sel] - t_model) * wgt[sel]
        t_cost = np.einsum("nij,nij->n", t_res, t_res)
        better = t_cost <= cost[sel]
        every = bool(better.all())
        ok = idx if every else idx[better]
        if every and ok.size == n:  # every spot active and improved: take the trial arrays whole
            p, cost, UV, res = trial, t_cost, t_UV, t_res
        elif every:
            p[ok], cost[ok], UV[ok], res[ok] = trial, t_cost, t_UV, t_res
        else:
            p[ok] = trial[better]
            cost[ok] = t_cost[better]
            UV[ok], res[ok] = t_UV[better], t_res[better]
        lam[ok] = np.maximum(lam[ok] * 0.3, 1e-7)
        if every:  # no step refused: nothing is stuck
            continue
        rej = idx[~better]
        lam[rej] *= 10.0
        # At the minimum to rounding (no step lowers the cost by more than 1e-9 of it), or the
        # damping has grown past any useful step.
        stuck = rej[(t_cost[~better] - cost[rej] <= 1e-9 * cost[rej]) | (lam[rej] > 1e6)]
        converged[stuck] = True
        active[stuck] = False
    at_edge = ((p[:, 1] <= lo[:, 1] + 1e-6) | (p[:, 1] >= hi[:, 1] - 1e-6)
               | (p[:, 2] <= lo[:, 2] + 1e-6) | (p[:, 2] >= hi[:, 2] - 1e-6))
    s_spot = np.sqrt(p[:, 3] * p[:, 4])
    if not covariance:
        nan = np.full(n, np.nan)
        return p[:, 1], p[:, 2], nan, nan, p[:, 0], nan, converged & ~at_edge, truncated, s_spot, p
    if gain:
        model = _SubBatch(p, start, m).model()
        var = noise * noise + _clip(model - p[:, 5][:, None, None], 0, None) / gain
        A, _ = _normal_equations(UV, res, wgt / np.sqrt(var), np.ones(n, dtype=bool))
    else:
        # The information of each fit ended by a small step is J^T J one step before its end
        # (the step moved the centre by < tol); the others' is evaluated where they stopped.
        A = fisher
        rest = np.nonzero(~have_fisher)[0]
        if rest.size:
            A[rest] = _normal_equations(UV[rest], res[rest], wgt[rest], full[rest])[0]
        A = A / (noise * noise)
    cov = np.full((n, 6, 6), np.nan)
    try:
        cov[:] = np.linalg.inv(A)
    except np.linalg.LinAlgError:
        for i in range(n):
            try:
                cov[i] = np.linalg.inv(A[i])
            except np.linalg.LinAlgError:
                pass
    good = np.all(np.diagonal(cov, axis1=1, axis2=2) > 0, axis=1)
    sx = np.sqrt(np.abs(cov[:, 1, 1]))
    sy = np.sqrt(np.abs(cov[:, 2, 2]))
    sf = np.sqrt(np.abs(cov[:, 0, 0]))
    snr = np.where(sf > 0, p[:, 0] / sf, 0.0)
    ok_all = converged & good & ~at_edge & np.isfinite(sx) & np.isfinite(sy)
    sx = np.where(np.isfinite(sx), sx, np.inf)
    sy = np.where(np.isfinite(sy), sy, np.inf)
    return p[:, 1], p[:, 2], sx, sy, p[:, 0], snr, ok_all, truncated, s_spot, p


def _normal_equations(UV: np.ndarray, res: np.ndarray, wgt: np.ndarray,
                      full: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """J^T W J and J^T W r of the separable model, J[:, y, x, a] = U[:, a, y] V[:, a, x]
    with U = UV[:, 0], V = UV[:, 1].

    With unit weights both separate: J^T J = (U U^T) * (V V^T) elementwise and
    J^T r = sum_x (U r) V, costing m instead of m^2 per entry. Windows with weights
    (`full`: pixels left out, or shot noise) take the direct sums; res is already weighted.
    """
    G = np.matmul(UV, UV.swapaxes(-1, -2))  # U U^T and V V^T in one call
    A = G[:, 0] * G[:, 1]
    U, V = UV[:, 0], UV[:, 1]
    g = np.matmul(U, res)
    g *= V
    g = g.sum(axis=2)
    if full.any():
        k = np.nonzero(full)[0]
        n, m = len(k), UV.shape[3]
        J = (U[k][:, :, :, None] * V[k][:, :, None, :] * wgt[k][:, None, :, :]).reshape(n, 6, m * m)
        A[k] = np.matmul(J, J.transpose(0, 2, 1))
        g[k] = np.matmul(J, (res[k] * wgt[k]).reshape(n, m * m, 1))[:, :, 0]
    return A, g


class _SubBatch:
    """Model (and Jacobian) of the pixel-integrated Gaussian for a subset of the spots.

    start: (n, 2) column and row of each window's first pixel (float).
    """

    def __init__(self, p: np.ndarray, start: np.ndarray, m: int) -> None:
        self.p, self.start, self.m = p, start, m

    def model(self) -> np.ndarray:
        p = self.p
        frac = _edge_pieces(p[:, 1:3], p[:, 3:5], self.start, self.m)[0]
        fey = frac[:, 1] * p[:, 0, None]
        return fey[:, :, None] * frac[:, 0, None, :] + p[:, 5, None, None]

    def model_uv(self) -> tuple[np.ndarray, np.ndarray]:
        """Model and the separable Jacobian factors UV (n, 2, 6, m): U = UV[:, 0] over rows,
        V = UV[:, 1] over cols, J[:, y, x, a] = U[:, a, y] V[:, a, x] for
        p = (flux, x, y, sx, sy, b)."""
        p, m = self.p, self.m
        frac, d_c, d_s = _edge_pieces(p[:, 1:3], p[:, 3:5], self.start, m)
        n = p.shape[0]
        f = p[:, 0, None]
        ex, ey = frac[:, 0], frac[:, 1]
        UV = np.empty((n, 2, 6, m))
        U, V = UV[:, 0], UV[:, 1]
        U[:, 0] = ey
        np.multiply(ey, f, out=U[:, 1])
        U[:, 3] = U[:, 1]
        np.multiply(d_c[:, 1], f, out=U[:, 2])
        np.multiply(d_s[:, 1], f, out=U[:, 4])
        V[:, 0] = V[:, 2] = V[:, 4] = ex
        V[:, 1] = d_c[:, 0]
        V[:, 3] = d_s[:, 0]
        UV[:, :, 5] = 1.0
        model = U[:, 1, :, None] * ex[:, None, :]
        model += p[:, 5, None, None]
        return model, UV


def _measure_many(
    raw: np.ndarray, resid: np.ndarray, noise: float, xs: np.ndarray, ys: np.ndarray,
    window_px: int, method: str, saturation: float | None, gain: float | None,
) -> list[Spot]:
    """Centroid every seed (xs, ys) on the background-subtracted image; attach peak and flags."""
    return _spots_from(raw, resid, window_px, method, saturation,
                       _centroids(raw, resid, noise, xs, ys, window_px, method, saturation, gain))


def _centroids(raw: np.ndarray, resid: np.ndarray, noise: float, xs: np.ndarray, ys: np.ndarray,
               window_px: int, method: str, saturation: float | None, gain: float | None,
               s0: float | None = None) -> tuple[np.ndarray, ...]:
    """x, y, sigma_x, sigma_y, flux, snr, converged, truncated, spot sigma (NaN for com).
    s0: a start for the fitted spot sigma (None: from each window's second moment)."""
    if method == "com":
        out = _centroid_com_batch(resid, noise, xs, ys, window_px, gain)
        return (*out, np.full(xs.size, np.nan))
    if method == "gauss":
        return _gauss_fit_batch(resid, noise, xs, ys, window_px, gain, raw=raw, saturation=saturation,
                                s0=None if s0 is None else np.full(xs.size, s0))
    raise ValueError(f"unknown centroid method {method!r}: use 'com' or 'gauss'")


def _spots_from(raw: np.ndarray, resid: np.ndarray, window_px: int, method: str, saturation: float | None,
                fit: tuple[np.ndarray, ...]) -> list[Spot]:
    cx, cy, sx, sy, flux, snr, conv, trunc = fit[:8]
    h, w = raw.shape
    half = window_px // 2
    xi = np.rint(_clip(cx, 0.0, w - 1.0)).astype(int)
    yi = np.rint(_clip(cy, 0.0, h - 1.0)).astype(int)
    ar = np.arange(-half, half + 1)
    index = _window_index((h, w), yi[:, None] + ar[None, :], xi[:, None] + ar[None, :])
    peak = _gather(resid, index).max(axis=(1, 2))
    raw_win = _gather_raw(raw, index)
    saturated = (raw_win.max(axis=(1, 2)) >= saturation) if saturation is not None else np.zeros(cx.size, bool)
    # A repaired pixel biases a centre of mass anywhere in its window; the Gaussian fit leaves
    # it out, which only matters when it was the spot's core (within 1 px of the centre).
    if method == "gauss":
        core = half - 1, half + 2
        bad = np.isneginf(raw_win[:, core[0]:core[1], core[0]:core[1]]).any(axis=(1, 2))
    else:
        bad = np.isneginf(raw_win).any(axis=(1, 2))
    bits = (np.where(conv, 0, SpotFlag.NOT_CONVERGED.value) | np.where(trunc, SpotFlag.TRUNCATED.value, 0)
            | np.where(saturated, SpotFlag.SATURATED.value, 0) | np.where(bad, SpotFlag.BAD_PIXEL.value, 0))
    flag_of = {int(b): SpotFlag(int(b)) for b in np.unique(bits)}
    rows = zip(cx.tolist(), cy.tolist(), np.asarray(sx, float).tolist(), np.asarray(sy, float).tolist(),
               np.asarray(flux, float).tolist(), peak.tolist(), np.asarray(snr, float).tolist(),
               [flag_of[b] for b in bits.tolist()])
    return [_new_spot(r) for r in rows]


_SPOT_FIELDS = ("x", "y", "sigma_x", "sigma_y", "flux", "peak", "snr", "flags")


def _new_spot(values: tuple) -> Spot:
    """A Spot from its field values in order, without the frozen dataclass's per-field
    object.__setattr__ calls (a third of the cost of a whole frame's spots otherwise); the
    fields are plain Python floats and a SpotFlag, as Spot(...) would hold."""
    spot = object.__new__(Spot)
    spot.__dict__.update(zip(_SPOT_FIELDS, values))
    return spot


def detect_spots(
    image: np.ndarray,
    *,
    threshold_sigma: float = 5.0,
    window_px: int | None = None,
    method: str = "gauss",
    saturation: float | None = None,
    background: Background | None = None,
    smooth_px: float = 1.0,
    min_area_px: int = 1,
    max_area_px: int | None = None,
    gain: float | None = None,
    repair_bad_pixels: bool = True,
) -> list[Spot]:
    """Find every spot above the background and centroid it; returns Spots in (x, y) order.

    Detection thresholds a matched-filter image (Gaussian smoothing of sigma smooth_px) at
    threshold_sigma times its own noise (white-noise propagation through the kernel), labels
    8-connected components, and centroids each from its brightest smoothed pixel with
    method "com" (iterated windowed centre of mass) or "gauss" (pixel-integrated Gaussian fit).
    The default "gauss" is the most precise (it reaches the Cramer-Rao bound). window_px should
    span about three FWHM of the spot; None sizes it from the spots themselves
    (+/-3.5 fitted spot sigmas). gain (DN per electron), when given,
    adds shot noise to the per-spot variance. A component with two separated peaks, or larger
    than max_area_px (default: 4 windows), is flagged MERGED. Hot and dead pixels are repaired
    first (repair_isolated_pixels) unless repair_bad_pixels is False; saturation is judged on
    the raw frame.
    """
    raw = _as_float_image(image)
    bg = background or estimate_background(raw)
    noise = bg.noise
    level = bg.level
    resid = raw - level
    # float32 is ample for a detection threshold and halves the cost on large frames; the
    # candidates of the repair come from it too (half the memory traffic of the float64 frame):
    # a threshold lowered by 2^-20 makes them a superset, each then judged on its float64 value.
    r32 = resid.astype(np.float32)
    if repair_bad_pixels:
        k_rep = _REPAIR_K_SIGMA
        cand = np.flatnonzero(np.abs(r32.ravel()) > np.float32(k_rep * noise * (1.0 - 2.0 ** -20)))
        resid, fixed = _repair_candidates(resid, noise, cand, k_sigma=k_rep, copy=False)  # resid is ours
        raw = _without(raw, fixed)
        r32[fixed] = resid[fixed]
    if smooth_px > 0:
        sm = gaussian_smooth(r32, smooth_px, truncate=3.0)
        k = _gauss_kernel_norm(smooth_px)
    else:
        sm, k = resid, 1.0
    thr = threshold_sigma * noise * k
    mask = sm > thr
    flat, lab_of, n = label_sparse(mask)
    if n == 0:
        return []
    areas = np.bincount(lab_of, minlength=n + 1)[1:]
    index = np.nonzero(areas >= min_area_px)[0] + 1
    if index.size == 0:
        return []
    # Pixels grouped by component (a stable sort keeps raster order inside each), then the
    # brightest smoothed pixel of each (the first in raster order among equals).
    order = np.argsort(lab_of, kind="stable")
    lab_sorted = lab_of[order]
    starts = np.flatnonzero(np.r_[True, lab_sorted[1:] != lab_sorted[:-1]])
    ends = np.r_[starts[1:], order.size]
    v_sorted = sm.ravel()[flat[order]]
    group_max = np.maximum.reduceat(v_sorted, starts)
    at_max = v_sorted == np.repeat(group_max, ends - starts)
    first = order[np.minimum.reduceat(np.where(at_max, np.arange(order.size), order.size), starts)]
    # Bounding boxes of the components from the same sort (labels 1..n, in order).
    rr, cc = np.divmod(flat, sm.shape[1])
    r_lo, r_hi = np.minimum.reduceat(rr[order], starts), np.maximum.reduceat(rr[order], starts) + 1
    c_lo, c_hi = np.minimum.reduceat(cc[order], starts), np.maximum.reduceat(cc[order], starts) + 1
    peak_r, peak_c = rr[first[index - 1]], cc[first[index - 1]]
    xs, ys = peak_c.astype(float), peak_r.astype(float)
    if window_px is None and method == "gauss":
        extent = np.maximum(r_hi - r_lo, c_hi - c_lo)[index - 1]
        window_px, fit = _sized_gauss_fits(raw, resid, noise, xs, ys, extent, saturation, gain)
    else:
        if window_px is None:
            extent = np.maximum(r_hi - r_lo, c_hi - c_lo)[index - 1]
            window_px = _window_from_probe(raw, resid, noise, xs, ys, extent, saturation, gain)[0]
        fit = _centroids(raw, resid, noise, xs, ys, window_px, method, saturation, gain)
    spots = _spots_from(raw, resid, window_px, method, saturation, fit)
    if max_area_px is None:
        max_area_px = 4 * window_px * window_px
    # Two peaks in one component: only components holding two local maxima need the dip test.
    # Local maxima: first against the left and right neighbours (few pixels pass), then only
    # those against the other six.
    hh, ww = sm.shape
    sm_flat = sm.ravel()
    v = sm_flat[flat]
    left = _clip(cc - 1, 0, ww - 1) - cc
    right = _clip(cc + 1, 0, ww - 1) - cc
    cand = np.flatnonzero((v >= sm_flat[flat + left]) & (v >= sm_flat[flat + right]))
    vc, rc, cc_c = v[cand], rr[cand], cc[cand]
    keep = np.ones(cand.size, dtype=bool)
    for dr in (-1, 1):
        row = _clip(rc + dr, 0, hh - 1) * ww
        for dc in (-1, 0, 1):
            keep &= vc >= sm_flat[row + _clip(cc_c + dc, 0, ww - 1)]
    n_max = np.bincount(lab_of[cand[keep]], minlength=n + 1)
    merged = areas[index - 1] > max_area_px
    for i in np.flatnonzero(~merged & (n_max[index] >= 2)).tolist():
        j = int(index[i]) - 1
        box = (slice(int(r_lo[j]), int(r_hi[j])), slice(int(c_lo[j]), int(c_hi[j])))
        merged[i] = _two_peaks(sm, flat[order[starts[j]:ends[j]]], box, (int(peak_r[i]), int(peak_c[i])), thr)
    for i in np.flatnonzero(merged).tolist():
        spots[i] = replace(spots[i], flags=spots[i].flags | SpotFlag.MERGED)
    return spots


def _window_for(s_spot: float) -> int:
    """Odd window of +/-3.5 spot sigmas, 7 to 61 px: it holds 99.95 % of a Gaussian's flux
    along each axis and leaves a border for the background."""
    return int(min(61, max(7, 2 * math.ceil(3.5 * s_spot) + 1)))


def _probe_pick(count: int, probe: int = 32) -> np.ndarray:
    """Up to `probe` indices spread evenly through a list of count spots."""
    if count <= probe:
        return np.arange(count)
    return np.linspace(0, count - 1, probe).astype(int)  # strictly increasing: step > 1


def _moment_sigma(win: _Windows, noise: float) -> float:
    """Median spot sigma of the windows from second moments of the positive excess over the
    border background, less what clipped noise adds: each pixel's max(0, noise) has mean
    noise / sqrt(2 pi), spread evenly over the window (mean of the half-normal distribution)."""
    data, wgt = win.data, win.wgt
    bsum = data[:, 0].sum(1) + data[:, -1].sum(1) + data[:, 1:-1, 0].sum(1) + data[:, 1:-1, -1].sum(1)
    bcnt = wgt[:, 0].sum(1) + wgt[:, -1].sum(1) + wgt[:, 1:-1, 0].sum(1) + wgt[:, 1:-1, -1].sum(1)
    b = _clip(bsum / np.maximum(bcnt, 1.0), -3 * noise, 3 * noise)
    pos = _clip(data - b[:, None, None], 0, None)
    pos *= wgt
    e = noise / math.sqrt(2.0 * math.pi)
    m = data.shape[1]
    ar = np.arange(m, dtype=float)
    tot = pos.sum(axis=(1, 2)) - e * wgt.sum(axis=(1, 2))
    good = tot > 0
    if not good.any():
        return 1.0
    safe = np.where(good, tot, 1.0)
    m2 = np.zeros(len(b))
    for axis in (1, 2):  # summing rows gives column profiles, then row profiles
        prof = pos.sum(axis=axis) - e * wgt.sum(axis=axis)  # window coordinates 0..m-1
        c = (prof @ ar) / safe
        m2 += (prof * (ar - c[:, None]) ** 2).sum(1) / safe
    s2 = np.maximum(m2[good] / 2.0 - 1.0 / 12.0, 0.09)
    return _median(np.sqrt(s2))


def _sized_gauss_fits(raw: np.ndarray, resid: np.ndarray, noise: float, xs: np.ndarray, ys: np.ndarray,
                      extent: np.ndarray, saturation: float | None,
                      gain: float | None) -> tuple[int, tuple[np.ndarray, ...]]:
    """Gaussian fits of every spot in a window of +/-3.5 fitted spot sigmas (_window_for).

    The first window comes from the second moments of up to 32 spots (in a window of their
    detected size plus a pixel each side); all spots are fitted in it, their sigma started at
    the median of those moments. When the median fitted
    sigma asks for another window, all are fitted once more in that one, starting from the
    first fits. Returns the window and the fits (as _gauss_fit_batch).
    """
    pick = _probe_pick(len(xs))
    guess = int(min(61, max(7, int(_median(extent[pick])) + 2))) | 1
    s_moment = _moment_sigma(_fit_windows(resid, xs[pick], ys[pick], guess, None, raw, saturation), noise)
    window = _window_for(s_moment)
    # The noise-corrected median sigma is a better start for every spot's sigma than each
    # window's own second moment (which clipped noise inflates): one fit iteration fewer.
    fit = _gauss_fit_batch(resid, noise, xs, ys, window, gain, raw=raw, saturation=saturation,
                           s0=np.full(xs.size, s_moment))
    ok = fit[6] & ~fit[7]
    s_spot = _median(fit[8][ok]) if ok.any() else 1.0
    need = _window_for(s_spot)
    if need == window:
        return window, fit
    return need, _gauss_fit_batch(resid, noise, xs, ys, need, gain, raw=raw, saturation=saturation, p0=fit[9])


def _window_from_probe(raw: np.ndarray, resid: np.ndarray, noise: float, xs: np.ndarray, ys: np.ndarray,
                       extent: np.ndarray, saturation: float | None, gain: float | None,
                       probe: int = 32) -> tuple[int, float | None]:
    """Odd window of +/-3.5 fitted spot sigmas (at least 7 px), from Gaussian fits of up to
    `probe` spots spread through the list, widened until the window holds them.
    extent: the larger side of each spot's detected component (px), the first guess.
    Returns the window and the median fitted spot sigma (None when no probe fit converged),
    a start for the fits of all the spots."""
    pick = _probe_pick(len(xs), probe)
    sizes = extent[pick]
    window = int(min(61, max(7, int(np.median(sizes)) + 2))) | 1
    need = window
    for _ in range(4):
        # The probe needs the spot sigma to a few per cent only (it picks an odd window): a
        # centre step below 1e-2 px leaves far less than that (Gauss-Newton converges
        # quadratically near the minimum).
        fit = _gauss_fit_batch(resid, noise, xs[pick], ys[pick], window, gain, raw=raw,
                               saturation=saturation, max_iter=6, tol=1e-2, covariance=False)
        ok = fit[6] & ~fit[7]
        s_spot = float(np.median(fit[8][ok])) if ok.any() else None
        need = _window_for(s_spot or 1.0)
        if need <= window:
            break
        window = need
    return need, s_spot


_NEIGH_DR = np.array([-1, -1, -1, 0, 0, 1, 1, 1])  # the 8 neighbours of a pixel
_NEIGH_DC = np.array([-1, 0, 1, -1, 1, -1, 0, 1])


def repair_isolated_pixels(
    resid: np.ndarray, noise: float, *, k_sigma: float = _REPAIR_K_SIGMA, min_spot_sigma_px: float = 0.5,
    margin_sigma: float = 3.0, rel_tolerance: float = 0.05, copy: bool = True,
) -> tuple[np.ndarray, tuple[np.ndarray, np.ndarray]]:
    """Replace hot and dead pixels by their 8-neighbour median; spots, however sharp, stay.

    Why a spot can never be taken for a hot pixel: any image of a source through a Gaussian blur
    of sigma s (the smallest blur the optics can give, min_spot_sigma_px), integrated over pixels,
    is the Gaussian convolved with a positive measure. Its logarithm then has a second derivative
    of at least -1/s^2 along any line (the curvature of log(G * mu) is -1/s^2 plus a posterior
    variance over s^4, which is >= 0; Brascamp & Lieb, J. Funct. Anal. 22:366, 1976, for the
    log-concavity of such convolutions). Sampled at pixel spacing d this gives
    v_c^2 <= v_left v_right exp(d^2 / s^2) for every line through the pixel. A hot pixel breaks
    that bound along at least one of the four lines (row, column, diagonals), even beside a
    bright spot; a spot of sigma >= s breaks it along none. Noise is allowed for by margin_sigma noise sigmas on each pixel and a
    relative tolerance (gain non-uniformity). A pixel more than k_sigma sigmas below the
    background is dead (nothing real is darker). Candidates are pixels at least k_sigma sigmas
    above the background.

    Works on a background-subtracted image (rows, cols); returns the repaired copy and the
    (rows, cols) indices of the repaired pixels. copy=False repairs a float64 image in place
    (for a caller that owns it; saves a copy of the frame).

    >>> img = np.zeros((7, 7)); img[3, 3] = 1000.0
    >>> fixed, idx = repair_isolated_pixels(img, 1.0)
    >>> float(fixed[3, 3]), [int(i[0]) for i in idx]
    (0.0, [3, 3])
    """
    img = np.asarray(resid, dtype=float)
    flat = np.flatnonzero(np.abs(img.ravel()) > k_sigma * noise)
    return _repair_candidates(resid, noise, flat, k_sigma=k_sigma, min_spot_sigma_px=min_spot_sigma_px,
                              margin_sigma=margin_sigma, rel_tolerance=rel_tolerance, copy=copy)


def _repair_candidates(
    resid: np.ndarray, noise: float, flat: np.ndarray, *, k_sigma: float = _REPAIR_K_SIGMA,
    min_spot_sigma_px: float = 0.5, margin_sigma: float = 3.0, rel_tolerance: float = 0.05,
    copy: bool = True,
) -> tuple[np.ndarray, tuple[np.ndarray, np.ndarray]]:
    """repair_isolated_pixels given the flat indices of its candidates, or of a superset of
    them (the tests below judge each on its own value and neighbours)."""
    none = (np.zeros(0, dtype=int), np.zeros(0, dtype=int))
    img = np.asarray(resid, dtype=float)
    h, w = img.shape
    if flat.size == 0:
        return resid, none
    rr, cc = np.divmod(flat, w)
    # Neighbours by flat indices (row and column clipped once each): one 1-D gather per neighbour.
    pixels = img.ravel()
    row_at = {dr: _clip(rr + dr, 0, h - 1) * w for dr in (-1, 0, 1)}
    col_at = {dc: _clip(cc + dc, 0, w - 1) for dc in (-1, 0, 1)}

    def at(dr: int, dc: int) -> np.ndarray:  # neighbour values, edge pixels repeated
        return pixels[row_at[dr] + col_at[dc]]

    v = img.ravel()[flat]
    # The log-curvature test along the four lines through the pixel (pairs of opposite neighbours).
    v_lo = v - margin_sigma * noise
    floor = noise  # a neighbour is never taken as darker than one noise sigma above zero
    broken = np.zeros(v.size, dtype=bool)  # True where some line forbids a spot
    for (dr, dc) in ((0, 1), (1, 0), (1, 1), (1, -1)):
        a = at(dr, dc)
        b = at(-dr, -dc)
        hi_a = np.maximum(a * (1 + rel_tolerance) + margin_sigma * noise, floor)
        hi_b = np.maximum(b * (1 + rel_tolerance) + margin_sigma * noise, floor)
        bound = hi_a * hi_b * math.exp((dr * dr + dc * dc) / min_spot_sigma_px ** 2)
        broken |= (v_lo > 0) & (v_lo * v_lo > bound)
    hot = (v > k_sigma * noise) & broken
    dead = v < -k_sigma * noise
    bad = hot | dead
    if not bad.any():
        return resid, none
    rb, cb = rr[bad], cc[bad]
    neigh = pixels[_clip(rb[:, None] + _NEIGH_DR, 0, h - 1) * w + _clip(cb[:, None] + _NEIGH_DC, 0, w - 1)]
    neigh.sort(axis=1)
    med = (neigh[:, 3] + neigh[:, 4]) / 2.0  # the median of 8 values, as np.median gives it
    out = img.copy() if copy or img is not resid else img
    idx = (rr[bad], cc[bad])
    out[idx] = med
    return out, idx


class _Repaired:
    """The raw frame read as if its repaired pixels were -inf, without a copy of the frame:
    only windows are ever read from it. A boolean image marks the repaired pixels (np.zeros
    of a bool frame costs next to nothing until its pages are touched)."""

    def __init__(self, raw: np.ndarray, flat: np.ndarray) -> None:
        self.raw = raw
        self.bad = np.zeros(raw.size, dtype=bool)
        self.bad[flat] = True
        self.shape = raw.shape

    def gather(self, index: np.ndarray) -> np.ndarray:
        out = _gather(self.raw, index)
        out[self.bad[index]] = -np.inf
        return out


def _without(raw: np.ndarray, idx: tuple[np.ndarray, np.ndarray]) -> np.ndarray | _Repaired:
    """Raw frame with repaired pixels reading -inf: a hot pixel never reads as saturation, and a
    window holding one is flagged BAD_PIXEL."""
    if idx[0].size == 0:
        return raw
    return _Repaired(raw, idx[0] * raw.shape[1] + idx[1])


def _gather_raw(raw: np.ndarray | _Repaired, index: np.ndarray) -> np.ndarray:
    """Raw pixels at flat indices, repaired ones as -inf."""
    return raw.gather(index) if isinstance(raw, _Repaired) else _gather(raw, index)


def _gauss_kernel_norm(sigma: float) -> float:
    """Noise gain of the normalised Gaussian kernel (truncate 3) of gaussian_smooth (white noise)."""
    radius = int(3.0 * sigma + 0.5)
    t = np.arange(-radius, radius + 1)
    k1 = np.exp(-0.5 * (t / sigma) ** 2)
    k1 /= k1.sum()
    return float((k1 ** 2).sum())  # 2-D separable kernel: (sum k1^2)^2 under the root


def _two_peaks(
    sm: np.ndarray, pixels: np.ndarray, sl: tuple[slice, slice], main: tuple[int, int], thr: float,
) -> bool:
    """True when a second local maximum is separated from the main one by a clear dip.

    A dip of at least 15 % of the lower peak along the joining segment (a Sparrow-like
    criterion, common practice) distinguishes two spots from noise ripples on one spot.
    """
    # The component alone (pixels: its flat indices in sm), -inf around it.
    box = np.full((sl[0].stop - sl[0].start, sl[1].stop - sl[1].start), -np.inf, dtype=sm.dtype)
    pr, pc = np.divmod(pixels, sm.shape[1])
    box[pr - sl[0].start, pc - sl[1].start] = sm.ravel()[pixels]
    if box.size <= 9:
        return False
    lm = (box == maximum_3x3(box)) & (box > thr)
    rr, cc = np.nonzero(lm)
    if rr.size < 2:
        return False
    rr = rr + sl[0].start
    cc = cc + sl[1].start
    r0, c0 = main
    far = np.maximum(np.abs(rr - r0), np.abs(cc - c0)) >= 2
    if not far.any():
        return False
    k = int(np.argmax(np.where(far, sm[rr, cc], -np.inf)))
    best = (int(rr[k]), int(cc[k]))
    n = 2 * max(abs(best[0] - r0), abs(best[1] - c0)) + 1
    line_r = np.linspace(r0, best[0], n)
    line_c = np.linspace(c0, best[1], n)
    vals = bilinear(sm, line_r, line_c)
    low = min(sm[r0, c0], sm[best])
    return low > thr and float(vals.min()) < 0.85 * low


def centroid_at(
    image: np.ndarray,
    x0: float,
    y0: float,
    window_px: int = 7,
    *,
    search_px: int | None = None,
    method: str = "gauss",
    saturation: float | None = None,
    background: Background | None = None,
    gain: float | None = None,
    repair_bad_pixels: bool = True,
) -> Spot:
    """Centroid of the one spot near (x0, y0) (x = column, y = row), for scan mode.

    The brightest smoothed pixel within search_px (default 3 windows) of the start point seeds
    the centroid, so the expected position may be off by several pixels. Only a box of the
    search area plus one window each side is read (background, repair, fit), so the cost per
    pose does not grow with the frame. Raises ValueError
    when the start point lies outside the frame.
    """
    raw = _as_float_image(image)
    h, w = raw.shape
    if not (-0.5 <= x0 <= w - 0.5 and -0.5 <= y0 <= h - 0.5):
        raise ValueError(
            f"start point ({x0:.1f}, {y0:.1f}) is outside the {w}x{h} frame; check the expected "
            "spot position (x = column, y = row)"
        )
    search = search_px if search_px is not None else 3 * window_px
    xi, yi = int(round(x0)), int(round(y0))
    # Work in a box of the search area plus a window on every side: the whole frame is never
    # touched per pose. The background (level and noise) comes from the box unless given.
    reach = search + window_px
    bx0, bx1 = max(0, xi - reach), min(w, xi + reach + 1)
    by0, by1 = max(0, yi - reach), min(h, yi + reach + 1)
    sub = raw[by0:by1, bx0:bx1]
    if background is None:
        bg = estimate_background(sub)
        level: float | np.ndarray = bg.level
    else:
        bg = background
        level = bg.level[by0:by1, bx0:bx1] if isinstance(bg.level, np.ndarray) else bg.level
    resid = sub - level
    if repair_bad_pixels:
        resid, fixed = repair_isolated_pixels(resid, bg.noise, copy=False)  # resid is ours
        sub = _without(sub, fixed)
    xa, xb = max(0, xi - search) - bx0, min(w, xi + search + 1) - bx0
    ya, yb = max(0, yi - search) - by0, min(h, yi + search + 1) - by0
    box = gaussian_smooth(resid[ya:yb, xa:xb], 1.0)
    r, c = np.unravel_index(int(np.argmax(box)), box.shape)
    spot = _measure_many(sub, resid, bg.noise, np.array([float(xa + c)]), np.array([float(ya + r)]),
                         window_px, method, saturation, gain)[0]
    # Back to frame coordinates; the window only counts as truncated at the frame's edges.
    flags = spot.flags
    if flags & SpotFlag.TRUNCATED:
        half = window_px / 2.0
        x, y = spot.x + bx0, spot.y + by0
        if not ((x - half < -0.5) or (y - half < -0.5) or (x + half > w - 0.5) or (y + half > h - 0.5)):
            flags &= ~SpotFlag.TRUNCATED
    return replace(spot, x=spot.x + bx0, y=spot.y + by0, flags=flags)
