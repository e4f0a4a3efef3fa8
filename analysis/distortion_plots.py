"""Pictures of a distortion result, written as SVG by analysis.svg_plot (no plotting library:
the one-frame command stays well under a second, and the plots stay vector with text as text).

Axis order: plots show the image as seen, x = column to the right, y = row downward.
Every plot carries the run's one headline number (the same text as the JSON's "headline"), the
overall verdict in its title when spec limits were judged, and a footer with the UUT serial, the
run id and the date when given. The vector maps draw a reference arrow of stated length; the
radial plot draws the spec limit lines. Files: distortion_map.svg, distortion_radial.svg,
distortion_residual.svg.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from analysis.distortion import DistortionResult
from analysis.svg_plot import Figure, LegendEntry, colour_of, nice_ticks
from analysis.verdicts import overall

# Plot colours (our own choice): measured points, fitted curve, limit lines, muted grey.
BLUE, RED, ORANGE, GREY = "#1f5fa8", "#c0282d", "#e07b00", "#8a8a8a"
PLOT_NAMES = ("distortion_map", "distortion_radial", "distortion_residual")
SUFFIX = ".svg"


@dataclass(frozen=True)
class PlotLabels:
    """What the footer of every plot says: which unit, which run, when (all optional)."""

    uut_serial: str | None = None
    run_id: str | None = None
    date: str | None = None

    def footer(self) -> str:
        parts = [f"UUT {self.uut_serial}" if self.uut_serial else "UUT -",
                 f"run {self.run_id}" if self.run_id else "run -",
                 self.date or "date -"]
        return "   |   ".join(parts)


def verdict_word(result: DistortionResult) -> str:
    """PASS / FAIL / NOT JUDGED for a title (MARGINAL verdicts are named beside PASS)."""
    if not result.verdicts:
        return "NOT JUDGED"
    word = "FAIL" if overall(result.verdicts) == "FAILED" else "PASS"
    n_marg = sum(1 for v in result.verdicts if v.status == "MARGINAL")
    return f"{word} ({n_marg} marginal)" if n_marg and word == "PASS" else word


def headline_text(result: DistortionResult) -> str:
    """The run's one headline: identical on every plot and in the JSON."""
    if result.headline is not None:
        return result.headline.text
    return f"max distortion {result.max_distortion_percent:+.3f} %"


__all__ = ["PLOT_NAMES", "PlotLabels", "exaggeration_factor", "headline_text", "plot_distortion_map",
           "plot_radial_curve", "plot_residual_map", "reference_length", "verdict_word",
           "write_distortion_plots"]


def exaggeration_factor(vectors_px: np.ndarray, pitch_px: float) -> float:
    """A round factor (1, 2, 5 x 10^n) that draws the largest vector at about half a grid pitch."""
    mags = np.hypot(vectors_px[:, 0], vectors_px[:, 1])
    mags = mags[np.isfinite(mags)]
    if mags.size == 0 or mags.max() <= 0 or pitch_px <= 0:
        return 1.0
    raw = 0.5 * pitch_px / float(mags.max())
    exp10 = 10.0 ** np.floor(np.log10(raw))
    for m in (5.0, 2.0, 1.0):
        if m * exp10 <= raw:
            return float(m * exp10)
    return float(exp10)


def _pitch(points: np.ndarray) -> float:
    p = points[np.all(np.isfinite(points), axis=1)]
    if len(p) < 2:
        return 1.0
    d = np.hypot(p[:, None, 0] - p[None, :, 0], p[:, None, 1] - p[None, :, 1])
    np.fill_diagonal(d, np.inf)
    return float(np.median(d.min(axis=1)))


def reference_length(max_px: float) -> float:
    """The reference arrow's length: the largest 1, 2, 5 x 10^n not above the longest vector
    (so the key never shows an arrow longer than any in the map).

    >>> reference_length(3.24), reference_length(0.87)
    (2.0, 0.5)
    """
    if not math.isfinite(max_px) or max_px <= 0:
        return 1.0
    exp = 10.0 ** math.floor(math.log10(max_px))
    return next(m * exp for m in (5.0, 2.0, 1.0) if m * exp <= max_px * (1 + 1e-12))


def _title(fig: Figure, result: DistortionResult, what: str) -> None:
    """Verdict, what the plot shows and the headline; a long headline gets a smaller font
    (0.62 em per bold character, at least 9 px) rather than running off the page."""
    text = f"{verdict_word(result)}: {what} - {headline_text(result)}"
    size = max(9.0, min(14.0, (fig.width - 20) / (0.62 * max(len(text), 1))))
    fig.text(fig.width / 2, 26, text, size=round(size, 1), anchor="middle", weight="bold",
             cls="figure-title")


def _footer(fig: Figure, labels: PlotLabels | None) -> None:
    fig.text(10, fig.height - 10, (labels or PlotLabels()).footer(), size=10, colour="#555555",
             cls="footer")


def _vector_map(result: DistortionResult, vectors: np.ndarray, title: str, colour_label: str,
                path: Path, mark_defects: bool, labels: PlotLabels | None = None) -> Path:
    """Arrows from each measured point's ideal position, exaggerated by a round factor and
    coloured by their true length; detector outline, principal point, points not measured."""
    pts = result.points
    base = pts.ideal_px
    ok = pts.measured & np.all(np.isfinite(base), axis=1) & np.all(np.isfinite(vectors), axis=1)
    factor = exaggeration_factor(vectors[ok], _pitch(base[ok]))
    mag = np.hypot(vectors[:, 0], vectors[:, 1])
    vmax = float(mag[ok].max()) if ok.any() and mag[ok].max() > 0 else 1.0
    g = result.model.geometry
    fig = Figure(860, 700, description=f"{title}; {headline_text(result)}")
    _title(fig, result, title.split(" (")[0])
    ax = fig.axes((90, 70, 600, 470), (-0.05 * g.width, 1.05 * g.width),
                  (-0.05 * g.height, 1.05 * g.height), y_down=True, equal_aspect=True)
    ax.title(title)
    ax.rect(-0.5, -0.5, g.width - 0.5, g.height - 0.5, colour="#666666")
    ax.arrows(base[ok, 0], base[ok, 1], vectors[ok, 0] * factor, vectors[ok, 1] * factor,
              [colour_of(m, 0.0, vmax) for m in mag[ok]], cls="vectors")
    nm = ~pts.measured
    ax.markers(base[nm, 0], base[nm, 1], shape="cross", size=7, colour="#999999",
               label="not measured", cls="not-measured")
    if mark_defects and pts.defect.any():
        d = pts.defect
        ax.markers(pts.measured_px[d, 0], pts.measured_px[d, 1], shape="ring", size=16,
                   colour="#e01010", width=1.5, label="local defect", cls="defects")
    cx, cy = g.principal_point
    ax.markers([cx], [cy], shape="plus", size=16, colour="#e01010", width=2.0,
               label="principal point", cls="principal-point")
    xt, xn = nice_ticks(0.0, float(g.width), 8)
    step = xt[1] - xt[0]  # one spacing on both axes of an equal-aspect map
    yt = [round(k * step, xn + 1) for k in range(math.ceil(g.height / step) + 1)]
    ax.ticks(xt, yt, xnfrac=xn, ynfrac=xn, xlabel="x (column), px", ylabel="y (row), px",
             grid=False)
    left, top, w, h = ax.box
    fig.colour_bar((left + w + 22, top, 18, h), 0.0, vmax, colour_label)
    ref = reference_length(vmax)
    px_per_unit = w / (ax.xlim[1] - ax.xlim[0])
    entries = [LegendEntry(f"reference arrow: {ref:g} px (vectors drawn x{factor:g})", "arrow",
                           "#000000", arrow_px=ref * factor * px_per_unit),
               *ax.legend_entries]
    _, lh = fig.legend(left, top + h + 56, entries, ncol=2)
    fig.height = top + h + 56 + lh + 28
    _footer(fig, labels)
    return fig.save(path)


def plot_distortion_map(result: DistortionResult, path: str | os.PathLike[str],
                        labels: PlotLabels | None = None) -> Path:
    """Error vectors (measured - ideal) on the ideal grid, magnitude as colour."""
    return _vector_map(result, result.points.error_px,
                       f"Distortion map ({result.classification.label})",
                       "|measured - ideal|, px", Path(path), mark_defects=True, labels=labels)


def plot_residual_map(result: DistortionResult, path: str | os.PathLike[str],
                      labels: PlotLabels | None = None) -> Path:
    """Residual vectors after the full model fit, local defects circled."""
    return _vector_map(result, result.points.residual_px,
                       f"Residual after fit (RMS {result.model.rms_residual_px:.3f} px)",
                       "|residual|, px", Path(path), mark_defects=True, labels=labels)


def _finite_max(*arrays: np.ndarray) -> float:
    vals = [float(np.max(a[np.isfinite(a)])) for a in arrays if np.isfinite(a).any()]
    return max(vals) if vals else 1.0


def plot_radial_curve(result: DistortionResult, path: str | os.PathLike[str],
                      labels: PlotLabels | None = None) -> Path:
    """Local percent distortion against image height and field angle: points, fitted curve with
    its 1-sigma band, and the spec limit lines (+/- limit) of the percent-distortion keys."""
    pts = result.points
    c = result.curve
    ok = pts.measured & (pts.radius_ideal_px > 0)
    stats = ok & pts.in_field_stats
    limit_verdicts = [v for v in result.verdicts if v.unit == "%" and "distortion" in v.key]
    stat_vals = pts.distortion_percent[stats]
    stat_vals = stat_vals[np.isfinite(stat_vals)]
    curve_vals = np.abs(c.distortion_percent[np.isfinite(c.distortion_percent)])
    span = max(float(np.max(np.abs(stat_vals))) if stat_vals.size else 1.0,
               float(curve_vals.max()) if curve_vals.size else 0.0, 0.05,
               *(v.limit for v in limit_verdicts))
    yt, yn = nice_ticks(-1.3 * span, 1.3 * span, 9)
    fig = Figure(1120, 640, description=f"Radial distortion; {headline_text(result)}")
    _title(fig, result, "Radial distortion")
    fig.text(fig.width / 2, 48, f"{result.classification.label}: {result.classification.reason}",
             size=11, anchor="middle", colour="#333333", cls="classification")
    inside = c.radius_px <= c.measured_radius_max_px
    axes = []
    for left, xp, xc, lab in ((90, pts.radius_ideal_px, c.radius_px,
                               "ideal radial distance from the principal point, px"),
                              (640, pts.field_angle_deg, c.field_angle_deg, "field angle, deg")):
        xt, xn = nice_ticks(0.0, _finite_max(xp[ok], xc), 6)
        ax = fig.axes((left, 75, 440, 360), (xt[0], xt[-1]), (yt[0], yt[-1]))
        axes.append(ax)
        if c.sigma_percent is not None and np.isfinite(c.sigma_percent).all():
            ax.band(xc, c.distortion_percent - c.sigma_percent,
                    c.distortion_percent + c.sigma_percent, colour=RED, opacity=0.2,
                    label="fitted curve +/- 1 sigma")
        ax.hline(0.0, colour="#808080", width=0.8)
        for v, dash in zip(limit_verdicts, ("dashdot", "dotted")):
            ax.hline(v.limit, colour=ORANGE, width=1.4, dash=dash,
                     label=f"limit {v.key} (+/-{v.limit:g} %)")
            ax.hline(-v.limit, colour=ORANGE, width=1.4, dash=dash)
        ax.line(xc[inside], c.distortion_percent[inside], colour=RED, width=2.0,
                label="fitted radial curve", cls="fitted-curve")
        # the extrapolated part starts at the last measured sample so the curve is unbroken
        ext = ~inside
        if ext.any():
            first = int(np.argmax(ext))
            ext[max(first - 1, 0)] = True
        ax.line(xc[ext], c.distortion_percent[ext], colour=RED, width=2.0, dash="dashed",
                label="fitted curve, extrapolated", cls="fitted-curve-extrapolated")
        ax.markers(xp[ok & ~stats], pts.distortion_percent[ok & ~stats], shape="dot", size=4.5,
                   colour="#aaaaaa", label="near centre / defect (not in statistics)",
                   cls="points-excluded")
        ax.markers(xp[stats], pts.distortion_percent[stats], shape="dot", size=4.5, colour=BLUE,
                   label="measured points", cls="points-measured")
        ax.ticks(xt, yt, xnfrac=xn, ynfrac=yn, xlabel=lab,
                 ylabel="distortion, % of ideal image height")
    entries = axes[0].legend_entries
    order = ["measured points", "near centre / defect (not in statistics)", "fitted radial curve",
             "fitted curve, extrapolated", "fitted curve +/- 1 sigma"]
    entries = sorted(entries, key=lambda e: order.index(e.label) if e.label in order else len(order))
    _, lh = fig.legend(90, 75 + 360 + 58, entries, ncol=3, col_width=330)
    fig.height = 75 + 360 + 58 + lh + 30
    _footer(fig, labels)
    return fig.save(path)


def write_distortion_plots(result: DistortionResult, folder: str | os.PathLike[str], *,
                           uut_serial: str | None = None, run_id: str | None = None,
                           date: str | None = None) -> dict[str, Path]:
    """All three SVGs into folder (normally <run>/plots); returns name -> path.

    uut_serial, run_id and date go in the footer of every plot.
    """
    d = Path(folder)
    d.mkdir(parents=True, exist_ok=True)
    labels = PlotLabels(uut_serial, run_id, date)
    draw = (plot_distortion_map, plot_radial_curve, plot_residual_map)
    return {name: plot(result, d / f"{name}{SUFFIX}", labels) for name, plot in zip(PLOT_NAMES, draw)}
