"""Pictures of the image-quality results: MTF, MTF through the field, bad-pixel map, SiTF, NETD
map and 3-D noise, written as SVG by analysis.svg_plot (no plotting library is imported: drawing
them costs milliseconds, not the second a plotting library takes to load).

Images are shown as seen: x = column to the right, y = row downward. Detector maps (NETD, bad
pixels) are embedded rasters, one image pixel per detector pixel, drawn with ``image-rendering:
pixelated`` so a single bad pixel stays a sharp square; up to 960 columns they are drawn at an
integer number of screen pixels per detector pixel (1:1 for a 640 x 512 detector).
Files are ``<name>.svg``; the caller chooses the names (see station.analyses).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from pathlib import Path

import numpy as np

from analysis.badpixels import KINDS, BadPixelMap
from analysis.mtf import SfrResult
from analysis.netd import NetdMeasurement
from analysis.noise3d import COMPONENTS, Noise3dResult
from analysis.svg_plot import Figure, LegendEntry, colour_of, nice_ticks, viridis_rgb

__all__ = ["BAD_COLOURS", "NAN_COLOUR", "netd_map_rgb", "bad_pixel_rgb", "plot_bad_pixels",
           "plot_mtf", "plot_mtf_through_field", "plot_netd_map", "plot_noise3d", "plot_sitf"]

# Our own colour choices. Pixels without a value (bad pixels, NaN) in the NETD map: white, a
# neutral colour viridis never reaches (its lightest stop is yellow #fde725).
NAN_COLOUR = "#ffffff"
GOOD_COLOUR = "#e6e6e6"  # good pixels in the bad-pixel map
BAD_COLOURS = {"dead": "#000000", "hot": "#c0282d", "noisy": "#e07b00", "unresponsive": "#1f5fa8"}
CURVE_COLOURS = ("#1f5fa8", "#c0282d", "#2a9d4b", "#e07b00", "#7b4fa8", "#8c564b", "#555555")
BLUE, RED, GREY = "#1f5fa8", "#c0282d", "#8a8a8a"


def _rgb(hex_colour: str) -> tuple[int, int, int]:
    return int(hex_colour[1:3], 16), int(hex_colour[3:5], 16), int(hex_colour[5:7], 16)


def netd_map_rgb(values: np.ndarray, vmin: float, vmax: float) -> np.ndarray:
    """Map values to viridis over vmin..vmax (clipped), non-finite pixels in NAN_COLOUR."""
    v = np.asarray(values, float)
    t = (v - vmin) / (vmax - vmin) if vmax > vmin else np.zeros_like(v)
    rgb = viridis_rgb(t)
    rgb[~np.isfinite(v)] = _rgb(NAN_COLOUR)
    return rgb


def bad_pixel_rgb(bad: BadPixelMap) -> np.ndarray:
    """Good pixels light grey, each bad pixel in its class colour (the first of KINDS wins when
    a pixel is bad in several ways)."""
    rgb = np.empty(bad.shape + (3,), np.uint8)
    rgb[:] = _rgb(GOOD_COLOUR)
    for kind in reversed(KINDS):
        rgb[np.asarray(getattr(bad, kind), bool)] = _rgb(BAD_COLOURS[kind])
    return rgb


def _map_box(rows: int, cols: int, left: float, top: float) -> tuple[float, float, float, float]:
    """Box for a detector map: an integer zoom up to 960 columns (1:1 at 640 x 512, never below
    about 480 px wide), scaled to 640 px wide beyond."""
    s = max(1, math.floor(640 / cols)) if cols <= 960 else 640 / cols
    s = min(s, 600 / rows) if rows * s > 800 else s
    return left, top, cols * s, rows * s


def _map_axes(fig: Figure, rows: int, cols: int, left: float, top: float):  # type: ignore[no-untyped-def]
    ax = fig.axes(_map_box(rows, cols, left, top), (-0.5, cols - 0.5), (-0.5, rows - 0.5),
                  y_down=True, equal_aspect=True)
    return ax


def _map_ticks(ax, rows: int, cols: int) -> None:  # type: ignore[no-untyped-def]
    xt, xn = nice_ticks(0.0, float(cols - 1), 7)
    step = xt[1] - xt[0]  # one spacing on both axes of a pixel map
    yt = [round(k * step, xn + 1) for k in range(math.ceil(max(rows - 1, 1) / step) + 1)]
    ax.ticks(xt, yt, xnfrac=xn, ynfrac=xn, xlabel="column (x), px", ylabel="row (y), px",
             grid=False)


def _title(fig: Figure, text: str, y: float = 24) -> None:
    size = max(9.0, min(14.0, (fig.width - 20) / (0.62 * max(len(text), 1))))
    fig.text(fig.width / 2, y, text, size=round(size, 1), anchor="middle", weight="bold",
             cls="figure-title")


def plot_mtf(results: Sequence[SfrResult], path: str | Path, *,
             spec_min_at_nyquist: float | None = None,
             truth: Callable[[np.ndarray], np.ndarray] | None = None,
             title: str = "MTF (ISO 12233 slanted edge)") -> Path:
    """MTF curves (one per edge, 1-sigma band) against cycles/pixel, cycles/mm on top when the
    pitch is known, Nyquist marked, the spec point at Nyquist; `truth`, a callable of
    cycles/pixel, is drawn dashed when given (simulated cameras)."""
    fig = Figure(760, 520, description=title)
    pitch_um = results[0].pixel_pitch_um if results else None
    top = 84 if pitch_um else 50
    _title(fig, title)
    ax = fig.axes((80, top, 640, 320), (0.0, 1.0), (0.0, 1.05))
    for i, r in enumerate(results):
        c = CURVE_COLOURS[i % len(CURVE_COLOURS)]
        f, m, s = (np.asarray(a, float) for a in (r.freq_cyc_per_px, r.mtf, r.mtf_sigma))
        ax.band(f, m - s, m + s, colour=c, opacity=0.2)
        ax.line(f, m, colour=c, width=1.6, cls="mtf-curve",
                label=f"{r.mtf_direction} (edge {r.edge_angle_deg:.1f} deg): "
                      f"{r.mtf_at_nyquist:.3f} at Nyquist")
    if truth is not None:
        f = np.linspace(0, 1, 201)
        ax.line(f, truth(f), colour="#000000", width=1.0, dash="dashed",
                label="closed-form system MTF", cls="truth")
    ax.vline(0.5, colour=GREY, width=0.8)
    ax.text(0.5, 0.02, " Nyquist", size=10, colour="#555555")
    if spec_min_at_nyquist is not None:
        ax.markers([0.5], [spec_min_at_nyquist], shape="triangle_down", size=12, colour=RED,
                   label=f"spec: at least {spec_min_at_nyquist:g} at Nyquist", cls="spec")
    xt, xn = nice_ticks(0.0, 1.0, 6)
    yt, yn = nice_ticks(0.0, 1.0, 6)
    ax.ticks(xt, yt, xnfrac=xn, ynfrac=yn, xlabel="spatial frequency (cycles/pixel)",
             ylabel="MTF")
    if pitch_um:
        pitch_mm = pitch_um * 1e-3
        ct, cn = nice_ticks(0.0, 1.0 / pitch_mm, 6)
        ax.top_ticks([c * pitch_mm for c in ct], [f"{c:.{cn}f}" for c in ct], "cycles/mm")
    _, lh = fig.legend(80, top + 320 + 56, ax.legend_entries, ncol=1)
    fig.height = top + 320 + 56 + lh + 16
    return fig.save(path)


def plot_mtf_through_field(results: Sequence[SfrResult], shape: tuple[int, int],
                           path: str | Path, *, spec_min_at_nyquist: float | None = None
                           ) -> Path:
    """MTF at Nyquist at each edge position on the detector (ROI centres), one marker per
    edge (square: horizontal MTF, triangle: vertical), coloured by value and labelled with it;
    below-spec edges circled in red."""
    rows, cols = shape
    title = "MTF at Nyquist through the field"
    sub = (f"spec: at least {spec_min_at_nyquist:g}, below circled"
           if spec_min_at_nyquist is not None else "")
    fig = Figure(880, 700, description=f"{title}. {sub}")
    _title(fig, title)
    if sub:
        fig.text(fig.width / 2, 44, f"({sub})", size=11, anchor="middle", cls="subtitle")
    left, top = 90, 64
    ax = fig.axes((left, top, 600, 600 * rows / cols if cols >= rows else 480),
                  (-0.5, cols - 0.5), (-0.5, rows - 0.5), y_down=True, equal_aspect=True)
    ax.rect(-0.5, -0.5, cols - 0.5, rows - 0.5, colour="#666666")
    values = [r.mtf_at_nyquist for r in results]
    vmin, vmax = (min(values), max(values)) if values else (0.0, 1.0)
    if vmax <= vmin:
        vmin, vmax = vmin - 0.01, vmax + 0.01
    for r in results:
        x = r.roi.x0 + r.roi.width / 2.0
        y = r.roi.y0 + r.roi.height / 2.0
        ax.markers([x], [y], shape="square" if r.mtf_direction == "horizontal" else "triangle",
                   size=12, colour=colour_of(r.mtf_at_nyquist, vmin, vmax), cls="edges")
        ax.text(x, y, f"   {r.mtf_at_nyquist:.3f}", size=10, cls="edge-value")
        if spec_min_at_nyquist is not None and r.mtf_at_nyquist < spec_min_at_nyquist:
            ax.markers([x], [y], shape="ring", size=24, colour=RED, width=1.5, cls="below-spec")
    _map_ticks(ax, rows, cols)
    bl, bt, bw, bh = ax.box
    fig.colour_bar((bl + bw + 22, bt, 18, bh), vmin, vmax, "MTF at Nyquist")
    entries = [LegendEntry("horizontal MTF", "marker", "#bbbbbb", shape="square"),
               LegendEntry("vertical MTF", "marker", "#bbbbbb", shape="triangle")]
    if spec_min_at_nyquist is not None:
        entries.append(LegendEntry("below spec", "marker", RED, shape="ring", width=1.5))
    _, lh = fig.legend(bl, bt + bh + 52, entries, ncol=3)
    fig.height = bt + bh + 52 + lh + 16
    return fig.save(path)


def plot_bad_pixels(bad: BadPixelMap, path: str | Path) -> Path:
    """The detector as an embedded raster, one image pixel per detector pixel, each bad pixel in
    its class colour; an open marker around each bad pixel so single pixels are found at any
    zoom (one marker per bad pixel and class, the counts in the legend)."""
    rows, cols = bad.shape
    title = (f"bad pixels: {bad.count} ({bad.bad_percent:.3f} %), operability "
             f"{bad.operability_percent:.3f} %, largest cluster {bad.largest_cluster}")
    fig = Figure(780, 700, description=title)
    _title(fig, title)
    ax = _map_axes(fig, rows, cols, 80, 50)
    ax.image(bad_pixel_rgb(bad), cls="bad-pixel-map")
    entries = []
    for kind in KINDS:
        p = bad.positions(kind)
        ax.markers(p[:, 0], p[:, 1], shape="ring", size=9, colour=BAD_COLOURS[kind], width=1.0,
                   cls=f"bad-{kind}")
        entries.append(LegendEntry(f"{kind}: {len(p)}", "marker", BAD_COLOURS[kind],
                                   shape="square"))
    _map_ticks(ax, rows, cols)
    bl, bt, bw, bh = ax.box
    entries.append(LegendEntry("good", "marker", GOOD_COLOUR, shape="square"))
    _, lh = fig.legend(bl, bt + bh + 52, entries, ncol=3)
    fig.text(bl, bt + bh + 52 + lh + 16, "each bad pixel is drawn in its colour and circled; "
             "a pixel bad in several ways takes the first colour in this order", size=10,
             colour="#555555", cls="note")
    fig.width = max(fig.width, bl + bw + 40)
    fig.height = bt + bh + 52 + lh + 28
    return fig.save(path)


def plot_sitf(netd: NetdMeasurement, path: str | Path) -> Path:
    """Signal against source temperature: points, the radiance-linear fit, and the residuals
    with the points' 1-sigma bars below on the same temperature axis."""
    fit = netd.sitf_fit
    t = np.asarray(fit.temperatures_c, float)
    s = np.asarray(fit.signal_counts, float)
    tt = np.linspace(t.min() - 1, t.max() + 1, 200)
    pred = np.asarray(fit.predict(tt), float)
    res = np.asarray(fit.residuals(), float)
    sig = np.asarray(fit.signal_sigma_counts, float)
    at = netd.conditions.get("source_c")
    title = (f"SiTF {netd.sitf_counts_per_k:.2f} +/- {netd.sitf_sigma_counts_per_k:.2f} "
             f"counts/K" + (f" at {at:g} C" if at is not None else ""))
    fig = Figure(760, 600, description=title)
    _title(fig, title)
    xt, xn = nice_ticks(float(tt[0]), float(tt[-1]), 7)
    xlim = (xt[0], xt[-1])
    yt, yn = nice_ticks(float(min(s.min(), pred.min())), float(max(s.max(), pred.max())), 6)
    ax = fig.axes((90, 50, 640, 300), xlim, (yt[0], yt[-1]))
    ax.line(tt, pred, colour=RED, width=1.6, label="S = a + b L(T), in-band radiance",
            cls="fit")
    ax.markers(t, s, shape="dot", size=7, colour=BLUE, label="flats (good pixels' mean)",
               cls="points")
    if at is not None:
        ax.vline(float(at), colour=GREY, width=0.8)
    ax.ticks(xt, yt, xnfrac=xn, ynfrac=yn, xlabel="", ylabel="signal (counts)")
    rmax = float(np.nanmax(np.abs(res) + np.nan_to_num(sig))) if res.size else 1.0
    rt, rn = nice_ticks(-max(rmax, 1e-6), max(rmax, 1e-6), 4)
    axr = fig.axes((90, 380, 640, 110), xlim, (rt[0], rt[-1]))
    axr.hline(0.0, colour="#000000", width=0.8)
    axr.errorbars(t, res, yerr=sig, colour=BLUE, cls="residual-errorbars")
    axr.markers(t, res, shape="dot", size=6, colour=BLUE, cls="residuals")
    if at is not None:
        axr.vline(float(at), colour=GREY, width=0.8)
    axr.ticks(xt, rt, xnfrac=xn, ynfrac=rn, xlabel="source temperature (C)",
              ylabel="residual (counts)")
    entries = list(ax.legend_entries)
    if at is not None:
        entries.append(LegendEntry(f"source at {at:g} C (NETD temperature)", "line", GREY))
    _, lh = fig.legend(90, 380 + 110 + 52, entries, ncol=2)
    fig.height = 380 + 110 + 52 + lh + 16
    return fig.save(path)


def plot_netd_map(netd: NetdMeasurement, path: str | Path) -> Path:
    """Per-pixel NETD map (embedded raster, colour scale over the 1st..99th percentile, bad
    pixels white) with its colour bar in mK, and the histogram of the map with the frame NETD
    and the map's median marked."""
    m = np.asarray(netd.netd_map_mk, float)
    rows, cols = m.shape
    finite = m[np.isfinite(m)]
    lo, hi = (float(v) for v in np.percentile(finite, [1, 99])) if finite.size else (0.0, 1.0)
    if hi <= lo:
        lo, hi = lo - 0.5, hi + 0.5
    n_blank = int(m.size - finite.size)
    title = f"NETD {netd.netd_mk:.2f} +/- {netd.netd_sigma_mk:.2f} mK"
    fig = Figure(1400, 700, description=f"per-pixel NETD map and histogram; {title}")
    _title(fig, title)
    ax = _map_axes(fig, rows, cols, 70, 60)
    ax.image(netd_map_rgb(m, lo, hi), cls="netd-map")
    ax.title(f"per-pixel NETD (bad pixels white: {n_blank})", size=12)
    _map_ticks(ax, rows, cols)
    bl, bt, bw, bh = ax.box
    fig.colour_bar((bl + bw + 16, bt, 18, bh), lo, hi, "NETD (mK)")
    hl = bl + bw + 175
    counts, edges = np.histogram(finite, bins=80) if finite.size else (np.zeros(1), np.array([0, 1.0]))
    xt, xn = nice_ticks(float(edges[0]), float(edges[-1]), 7)
    yt, yn = nice_ticks(0.0, float(max(counts.max(), 1)) * 1.05, 6)
    axh = fig.axes((hl, bt, 480, bh), (xt[0], xt[-1]), (0.0, yt[-1]))
    axh.bars(edges[:-1], edges[1:], counts, colour=BLUE, cls="histogram")
    axh.vline(netd.netd_mk, colour=RED, width=1.6, cls="netd",
              label=f"NETD {netd.netd_mk:.2f} +/- {netd.netd_sigma_mk:.2f} mK")
    axh.vline(netd.median_netd_mk, colour="#000000", width=1.4, dash="dashed", cls="median",
              label=f"median of the map {netd.median_netd_mk:.2f} mK")
    axh.ticks(xt, yt, xnfrac=xn, ynfrac=yn, xlabel="NETD (mK)", ylabel="pixels per bin")
    axh.title("histogram of the map (80 bins)", size=12)
    _, lh = fig.legend(hl, bt + bh + 52, axh.legend_entries, ncol=1)
    fig.width = hl + 480 + 30
    fig.height = bt + bh + 52 + lh + 16
    return fig.save(path)


def plot_noise3d(result: Noise3dResult, path: str | Path) -> Path:
    """The seven 3-D noise components as bars with their 1-sigma uncertainty (mK when an SiTF
    is known, counts otherwise)."""
    mk = result.in_mk("sigma")
    vals = mk if mk is not None else result.sigma
    unc = result.in_mk("sigma_uncertainty") if mk is not None else result.sigma_uncertainty
    unit = "mK" if mk is not None else "counts"
    title = f"3-D noise, {result.shape[0]} frames of {result.shape[1]} x {result.shape[2]}"
    fig = Figure(700, 420, description=title)
    _title(fig, title)
    v = np.array([vals[k] for k in COMPONENTS], float)
    u = np.array([unc[k] for k in COMPONENTS], float)
    top_v = float(np.nanmax(np.nan_to_num(v + u))) if v.size else 1.0
    yt, yn = nice_ticks(0.0, max(top_v, 1e-9), 6)
    x = np.arange(len(COMPONENTS), dtype=float)
    ax = fig.axes((90, 50, 580, 300), (-0.6, len(COMPONENTS) - 0.4), (0.0, yt[-1]))
    ax.bars(x - 0.35, x + 0.35, v, colour=BLUE, cls="components")
    ax.errorbars(x, v, yerr=u, colour="#000000", cap=5, cls="uncertainty")
    ax.ticks(list(x), yt, xnfrac=0, ynfrac=yn, xlabel="component (t: temporal, v: rows, "
             "h: columns)", ylabel=f"sigma ({unit})", xtexts=list(COMPONENTS))
    fig.height = 50 + 300 + 60
    return fig.save(path)
