"""Pictures of the image-quality results: MTF, bad-pixel map, SiTF, NETD, 3-D noise (PNG).

matplotlib is imported inside each function (Agg backend), so importing this module costs
nothing. Images are shown as seen: x = column to the right, y = row downward.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from analysis.badpixels import BadPixelMap
from analysis.mtf import SfrResult
from analysis.netd import NetdMeasurement
from analysis.noise3d import COMPONENTS, Noise3dResult


def _plt() -> Any:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def plot_mtf(results: Sequence[SfrResult], path: str | Path, *,
             spec_min_at_nyquist: float | None = None,
             truth: Any = None, title: str = "MTF (ISO 12233 slanted edge)") -> Path:
    """MTF curves (one per edge) against cycles/pixel, the spec point marked at Nyquist;
    `truth`, a callable of cycles/pixel, is drawn dashed when given (simulated cameras)."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(7, 4.5))
    for r in results:
        ax.plot(r.freq_cyc_per_px, r.mtf, label=f"{r.mtf_direction} "
                f"(edge {r.edge_angle_deg:.1f} deg): {r.mtf_at_nyquist:.3f} at Nyquist")
        ax.fill_between(r.freq_cyc_per_px, r.mtf - r.mtf_sigma, r.mtf + r.mtf_sigma, alpha=0.2)
    if truth is not None:
        f = np.linspace(0, 1, 201)
        ax.plot(f, truth(f), "k--", lw=1, label="closed-form system MTF")
    ax.axvline(0.5, color="grey", lw=0.8)
    if spec_min_at_nyquist is not None:
        ax.plot([0.5], [spec_min_at_nyquist], "rv", ms=9,
                label=f"spec: at least {spec_min_at_nyquist:g} at Nyquist")
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1.05)
    ax.set_xlabel("spatial frequency (cycles/pixel)")
    ax.set_ylabel("MTF")
    if results and results[0].pixel_pitch_um:
        pitch_mm = results[0].pixel_pitch_um * 1e-3
        top = ax.secondary_xaxis("top", functions=(lambda f: f / pitch_mm,
                                                   lambda c: c * pitch_mm))
        top.set_xlabel("cycles/mm")
    ax.set_title(title)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8)
    return _save(fig, path)


def plot_mtf_through_field(results: Sequence[SfrResult], shape: tuple[int, int],
                           path: str | Path, *, spec_min_at_nyquist: float | None = None
                           ) -> Path:
    """MTF at Nyquist at each edge position on the detector (ROI centres), one marker per
    edge (square: horizontal MTF, triangle: vertical), coloured by value; below-spec circled."""
    plt = _plt()
    rows, cols = shape
    fig, ax = plt.subplots(figsize=(7, 7 * rows / cols + 0.8))
    values = [r.mtf_at_nyquist for r in results]
    vmin, vmax = (min(values), max(values)) if values else (0.0, 1.0)
    for r in results:
        x = r.roi.x0 + r.roi.width / 2.0
        y = r.roi.y0 + r.roi.height / 2.0
        sc = ax.scatter([x], [y], c=[r.mtf_at_nyquist], vmin=vmin, vmax=vmax + 1e-9,
                        cmap="viridis", marker="s" if r.mtf_direction == "horizontal" else "^",
                        s=80)
        ax.annotate(f"{r.mtf_at_nyquist:.3f}", (x, y), textcoords="offset points",
                    xytext=(6, 6), fontsize=8)
        if spec_min_at_nyquist is not None and r.mtf_at_nyquist < spec_min_at_nyquist:
            ax.scatter([x], [y], s=260, facecolors="none", edgecolors="r")
    if results:
        fig.colorbar(sc, ax=ax, label="MTF at Nyquist")
    ax.set_xlim(-0.5, cols - 0.5)
    ax.set_ylim(rows - 0.5, -0.5)
    ax.set_aspect("equal")
    ax.set_xlabel("column (x)")
    ax.set_ylabel("row (y)")
    title = "MTF at Nyquist through the field"
    if spec_min_at_nyquist is not None:
        title += f"\n(spec: at least {spec_min_at_nyquist:g}, below circled)"
    ax.set_title(title)
    return _save(fig, path)


def plot_bad_pixels(bad: BadPixelMap, path: str | Path) -> Path:
    """The detector with each bad pixel marked by class (markers, so single pixels show)."""
    plt = _plt()
    rows, cols = bad.shape
    fig, ax = plt.subplots(figsize=(7, 7 * rows / cols + 0.8))
    styles = {"dead": ("k", "s"), "hot": ("r", "^"), "noisy": ("tab:orange", "o"),
              "unresponsive": ("tab:blue", "D")}
    for kind, (colour, marker) in styles.items():
        p = bad.positions(kind)
        ax.scatter(p[:, 0], p[:, 1], s=10, c=colour, marker=marker,
                   label=f"{kind}: {len(p)}")
    ax.set_xlim(-0.5, cols - 0.5)
    ax.set_ylim(rows - 0.5, -0.5)
    ax.set_aspect("equal")
    ax.set_xlabel("column (x)")
    ax.set_ylabel("row (y)")
    ax.set_title(f"bad pixels: {bad.count} ({bad.bad_percent:.3f} %), operability "
                 f"{bad.operability_percent:.3f} %, largest cluster {bad.largest_cluster}")
    ax.legend(fontsize=8, loc="upper right")
    return _save(fig, path)


def plot_sitf(netd: NetdMeasurement, path: str | Path) -> Path:
    """Signal against source temperature: points, the radiance-linear fit, residuals."""
    plt = _plt()
    fit = netd.sitf_fit
    t = np.asarray(fit.temperatures_c)
    fig, (ax, axr) = plt.subplots(2, 1, figsize=(7, 6), sharex=True,
                                  gridspec_kw={"height_ratios": [3, 1]})
    tt = np.linspace(t.min() - 1, t.max() + 1, 200)
    ax.plot(t, fit.signal_counts, "o", label="flats (good pixels' mean)")
    ax.plot(tt, fit.predict(tt), "-", label="S = a + b L(T), in-band radiance")
    at = netd.conditions.get("source_c")
    if at is not None:
        ax.axvline(at, color="grey", lw=0.8)
        ax.set_title(f"SiTF {netd.sitf_counts_per_k:.2f} +/- {netd.sitf_sigma_counts_per_k:.2f} "
                     f"counts/K at {at:g} C")
    ax.set_ylabel("signal (counts)")
    ax.legend(fontsize=8)
    axr.errorbar(t, fit.residuals(), yerr=fit.signal_sigma_counts, fmt="o")
    axr.axhline(0, color="k", lw=0.8)
    axr.set_xlabel("source temperature (C)")
    axr.set_ylabel("residual (counts)")
    return _save(fig, path)


def plot_netd_map(netd: NetdMeasurement, path: str | Path) -> Path:
    """Per-pixel NETD map and its histogram, the frame NETD and the median marked."""
    plt = _plt()
    m = netd.netd_map_mk
    finite = m[np.isfinite(m)]
    fig, (ax, axh) = plt.subplots(1, 2, figsize=(11, 4))
    lo, hi = np.percentile(finite, [1, 99]) if finite.size else (0, 1)
    im = ax.imshow(m, vmin=lo, vmax=hi, cmap="viridis")
    fig.colorbar(im, ax=ax, label="NETD (mK)")
    ax.set_title("per-pixel NETD (bad pixels blank)")
    axh.hist(finite, bins=80)
    axh.axvline(netd.netd_mk, color="r", label=f"NETD {netd.netd_mk:.2f} +/- "
                f"{netd.netd_sigma_mk:.2f} mK")
    axh.axvline(netd.median_netd_mk, color="k", ls="--",
                label=f"median of the map {netd.median_netd_mk:.2f} mK")
    axh.set_xlabel("NETD (mK)")
    axh.legend(fontsize=8)
    return _save(fig, path)


def plot_noise3d(result: Noise3dResult, path: str | Path) -> Path:
    """The seven 3-D noise components as bars with their uncertainty (mK when an SiTF is
    known, counts otherwise)."""
    plt = _plt()
    mk = result.in_mk("sigma")
    vals = mk if mk is not None else result.sigma
    unc = result.in_mk("sigma_uncertainty") if mk is not None else result.sigma_uncertainty
    fig, ax = plt.subplots(figsize=(7, 4))
    ax.bar(COMPONENTS, [vals[k] for k in COMPONENTS], yerr=[unc[k] for k in COMPONENTS])
    ax.set_ylabel("sigma (mK)" if mk is not None else "sigma (counts)")
    ax.set_title(f"3-D noise, {result.shape[0]} frames of {result.shape[1]} x "
                 f"{result.shape[2]}")
    return _save(fig, path)


def _save(fig: Any, path: str | Path) -> Path:
    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    fig.tight_layout()
    fig.savefig(p, dpi=110)
    import matplotlib.pyplot as plt

    plt.close(fig)
    return p
