"""Pictures of the geometric family: boresight scatter, alignment convergence, FOV edges.

SVG files written by analysis.svg_plot (no plotting library is imported); each function writes
one file atomically (a temporary name, then a rename) and returns its path.

Axis conventions: boresight plots show azimuth to the right and elevation up (mrad), as the UUT's
line of sight would move on a screen in front of it; convergence shows the residual (px) on a
log scale against the iteration; the spot path shows rows growing downward, as the image is seen.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from analysis.svg_plot import Axes, Figure, LegendEntry, nice_ticks

__all__ = ["plot_boresight_scatter", "plot_alignment_convergence", "plot_fov_edges"]

# Our own colour choices: one colour per series, the limit / tolerance / edge in red.
SERIES = ("#1f5fa8", "#e07b00", "#2a9d4b", "#7b4fa8", "#8c564b", "#555555")
RED, GREY = "#c0282d", "#9a9a9a"


def _title(fig: Figure, text: str, y: float = 24, size: float = 14) -> None:
    size = max(9.0, min(size, (fig.width - 20) / (0.62 * max(len(text), 1))))
    fig.text(fig.width / 2, y, text, size=round(size, 1), anchor="middle", weight="bold",
             cls="figure-title")


def _ticked(ax: Axes, xlabel: str, ylabel: str, *, size: float = 11, n: int = 6,
            grid: bool = True) -> None:
    """Nice ticks (Heckbert) inside the axes' own limits."""
    xt, xn = nice_ticks(*ax.xlim, n)
    yt, yn = nice_ticks(*ax.ylim, n)
    ax.ticks(xt, yt, xnfrac=xn, ynfrac=yn, xlabel=xlabel, ylabel=ylabel, size=size, grid=grid)


def _equal_limits(xlo: float, xhi: float, ylo: float, yhi: float, w: float, h: float
                  ) -> tuple[tuple[float, float], tuple[float, float]]:
    """Widen the narrower range about its centre so one data unit is the same number of pixels
    on both axes of a w x h box (the box keeps its size)."""
    sx, sy = max(xhi - xlo, 1e-12), max(yhi - ylo, 1e-12)
    s = max(sx / w, sy / h)
    cx, cy = (xlo + xhi) / 2, (ylo + yhi) / 2
    return (cx - s * w / 2, cx + s * w / 2), (cy - s * h / 2, cy + s * h / 2)


def plot_boresight_scatter(points_mrad: Sequence[tuple[float, float]],
                           sigmas_mrad: Sequence[tuple[float, float]], labels: Sequence[str],
                           tolerance_mrad: float | None, path: Path | str, *,
                           title: str = "Boresight relative to the mount") -> Path:
    """Each boresight (az, el) mrad with its 2-sigma error bars, the tolerance circle (the
    ``max_boresight_error_mrad`` limit) and the mount's zero; beside it a zoom around the
    measurements, where their spread and error bars are readable."""
    fig = Figure(900, 560, description=f"{title} (error bars: 2 sigma)")
    _title(fig, title)
    fig.text(fig.width / 2, 44, "(error bars: 2 sigma)", size=11, anchor="middle",
             cls="subtitle")
    extent = max([abs(v) for p in points_mrad for v in p] + [tolerance_mrad or 0.0, 0.1]) * 1.25
    ax = fig.axes((80, 70, 400, 400), (-extent, extent), (-extent, extent))
    ax.hline(0.0, colour="#b3b3b3", width=0.8)
    ax.vline(0.0, colour="#b3b3b3", width=0.8)
    if tolerance_mrad:
        ax.circle(0.0, 0.0, tolerance_mrad, colour=RED, dash="dashed", cls="limit",
                  label=f"limit {tolerance_mrad:g} mrad")
    _series(ax, points_mrad, sigmas_mrad, labels, size=8)
    _ticked(ax, "azimuth (mrad)", "elevation (mrad)")
    ax.title("all, about the mount's zero", size=12)
    if points_mrad:
        ca = sum(p[0] for p in points_mrad) / len(points_mrad)
        ce = sum(p[1] for p in points_mrad) / len(points_mrad)
        half = max([abs(p[0] - ca) for p in points_mrad] + [abs(p[1] - ce) for p in points_mrad]
                   + [4 * max(s) for s in sigmas_mrad] + [1e-3]) * 1.3
        zoom = fig.axes((590, 70, 280, 280), (ca - half, ca + half), (ce - half, ce + half))
        _series(zoom, points_mrad, sigmas_mrad, [""] * len(points_mrad), size=6, cls="zoom-points")
        _ticked(zoom, "azimuth (mrad)", "elevation (mrad)", size=9, n=4)
        zoom.title("zoom", size=12)
    _, lh = fig.legend(80, 70 + 400 + 56, ax.legend_entries, ncol=2)
    fig.height = 70 + 400 + 56 + lh + 16
    return fig.save(path)


def _series(ax: Axes, points: Sequence[tuple[float, float]],
            sigmas: Sequence[tuple[float, float]], labels: Sequence[str], *, size: float,
            cls: str = "points") -> None:
    for i, ((a, e), (sa, se), lab) in enumerate(zip(points, sigmas, labels)):
        c = SERIES[i % len(SERIES)]
        ax.errorbars([a], [e], xerr=[2 * sa], yerr=[2 * se], colour=c, width=1.2,
                     cls=f"{cls}-errorbars")
        ax.markers([a], [e], shape="dot", size=size, colour=c, label=lab or None, cls=cls)


def plot_alignment_convergence(iterations: Sequence[Mapping[str, Any]], tolerance_px: float,
                               path: Path | str) -> Path:
    """Residual offset (px, log scale) per iteration with the tolerance line, and the spot's
    path on the detector toward the reference pixel. `iterations` are
    ``AlignmentIteration.to_dict()`` records."""
    n = [int(it["iteration"]) for it in iterations]
    r = [max(float(it["residual_px"]), 1e-4) for it in iterations]
    xs = [float(it["offset_px"][0]) for it in iterations]
    ys = [float(it["offset_px"][1]) for it in iterations]
    fig = Figure(1000, 470, description="Alignment convergence and spot path")
    # left: log10 of the residual on a linear axis, ticks at whole decades
    logs = [math.log10(v) for v in r] + [math.log10(max(tolerance_px, 1e-4))]
    d0, d1 = math.floor(min(logs)), math.ceil(max(logs))
    if d1 == d0:
        d1 += 1
    nmin, nmax = (min(n), max(n)) if n else (1, 1)
    ax1 = fig.axes((110, 50, 340, 320), (nmin - 0.3, nmax + 0.3), (d0, d1))
    ax1.hline(math.log10(max(tolerance_px, 1e-4)), colour=RED, dash="dashed",
              label=f"tolerance {tolerance_px:g} px", cls="tolerance")
    ax1.line(n, [math.log10(v) for v in r], colour=SERIES[0], width=1.6)
    ax1.markers(n, [math.log10(v) for v in r], shape="dot", size=7, colour=SERIES[0],
                cls="iterations")
    decades = list(range(d0, d1 + 1))
    ax1.ticks(n, decades, xnfrac=0, ynfrac=0, xlabel="iteration",
              ylabel="spot offset from the reference pixel (px, log)",
              ytexts=[f"{10.0 ** k:g}" for k in decades])
    ax1.title("Alignment convergence", size=13)
    # right: the path on the detector, rows downward, equal aspect
    tol = abs(tolerance_px)
    xlo, xhi = min(xs + [-tol]), max(xs + [tol])
    ylo, yhi = min(ys + [-tol]), max(ys + [tol])
    pad = 0.1 * max(xhi - xlo, yhi - ylo, 1e-3)
    xlim, ylim = _equal_limits(xlo - pad, xhi + pad, ylo - pad, yhi + pad, 400, 320)
    ax2 = fig.axes((560, 50, 400, 320), xlim, ylim, y_down=True)
    ax2.circle(0.0, 0.0, tol, colour=RED, dash="dashed", cls="tolerance-circle")
    ax2.line(xs, ys, colour=SERIES[0], width=1.6)
    ax2.markers(xs, ys, shape="dot", size=7, colour=SERIES[0], cls="path")
    for k, (x, y) in enumerate(zip(xs, ys), start=1):
        ax2.text(x, y, f"  {k}", size=10, cls="iteration-number")
    _ticked(ax2, "offset x (px)", "offset y (px, down)")
    ax2.title("Spot path on the detector", size=13)
    entries = [*ax1.legend_entries,
               LegendEntry("reference pixel and tolerance circle", "line", RED, dash="dashed")]
    _, lh = fig.legend(110, 50 + 320 + 56, entries, ncol=2)
    fig.height = 50 + 320 + 56 + lh + 16
    return fig.save(path)


def plot_fov_edges(scan: Any, path: Path | str) -> Path:
    """Flux fraction against stage angle for each edge search (left, right, top, bottom), with
    2-sigma bars, the one-half level and the edge found, and a zoom on the last bracket, where
    the edge is decided (scan-mode FOV, `analysis.fov_scan.ScanFov`)."""
    fov = scan.fov
    diagonal = (f"D {fov.d_deg:.3f} ± {fov.sigma_d_deg:.3f} deg (corners)"
                if getattr(scan, "corners", None) else f"D {fov.d_deg:.3f} deg (derived)")
    title = (f"Field of view by edge bisection: H {fov.h_deg:.3f} ± {fov.sigma_h_deg:.3f}, "
             f"V {fov.v_deg:.3f} ± {fov.sigma_v_deg:.3f} deg, {diagonal}")
    fig = Figure(1100, 860, description=title)
    _title(fig, title)
    pw, ph = 430, 270
    for k, name in enumerate(("left", "right", "top", "bottom")):
        edge = scan.edges[name]
        probes = sorted(edge.probes, key=lambda p: p.angle_deg)
        left = 90 + (k % 2) * (pw + 110)
        top = 70 + (k // 2) * (ph + 130)
        angles = [p.angle_deg for p in probes] + [edge.angle_deg]
        lo, hi = min(angles), max(angles)
        pad = 0.05 * max(hi - lo, 1e-3)
        ax = fig.axes((left, top, pw, ph), (lo - pad, hi + pad), (-0.08, 1.1))
        _edge_panel(ax, probes, edge, cap=3.0, size=5)
        ax.vline(edge.angle_deg, colour=RED, dash="dashed", width=1.4, cls="edge",
                 label=f"edge {edge.angle_deg:.4f} ± {edge.sigma_deg:.4f} deg")
        _ticked(ax, "stage angle (deg)", "flux fraction on the detector", n=7)
        ax.title(f"{name} edge ({'azimuth' if name in ('left', 'right') else 'elevation'})",
                 size=13)
        near = [p for p in probes if abs(p.angle_deg - edge.angle_deg) < 0.2] or probes
        nlo = min([p.angle_deg for p in near] + [edge.angle_deg])
        nhi = max([p.angle_deg for p in near] + [edge.angle_deg])
        npad = 0.08 * max(nhi - nlo, 1e-4)
        inset = fig.axes((left + 0.36 * pw, top + 0.3 * ph, 0.3 * pw, 0.4 * ph),
                         (nlo - npad, nhi + npad), (-0.08, 1.1))
        _edge_panel(inset, near, edge, cap=1.5, size=3, cls="zoom-probes")
        _ticked(inset, "", "", size=8, n=3, grid=False)
        fig.legend(left + 6, top + ph + 52, ax.legend_entries, size=10)
    fig.height = 70 + 2 * (ph + 130)
    return fig.save(path)


def _edge_panel(ax: Axes, probes: Sequence[Any], edge: Any, *, cap: float, size: float,
                cls: str = "probes") -> None:
    ax.hline(0.5, colour=GREY, dash="dotted", cls="half")
    ax.errorbars([p.angle_deg for p in probes], [p.fraction for p in probes],
                 yerr=[2 * p.sigma for p in probes], colour=SERIES[0], cap=cap,
                 cls=f"{cls}-errorbars")
    ax.markers([p.angle_deg for p in probes], [p.fraction for p in probes], shape="dot",
               size=size, colour=SERIES[0], cls=cls)
    if cls != "probes":
        ax.vline(edge.angle_deg, colour=RED, dash="dashed", width=1.2)
