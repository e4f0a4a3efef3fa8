"""The trend of one figure drawn as a control chart: values, mean, 3-sigma band, spec limit.

Written as SVG by analysis.svg_plot (no plotting library is loaded by the history commands).
"""

from __future__ import annotations

from pathlib import Path

from analysis.svg_plot import Figure, nice_ticks
from station.history.queries import Trend

SUFFIX = ".svg"
BLUE, GREEN, RED = "#1f5fa8", "#2a9d4b", "#c0282d"  # our own choice


def plot_trend(t: Trend, out: Path) -> Path:
    """Write the chart as an SVG; outliers ringed in red, the spec limit dashed."""
    if Path(out).suffix.lower() != SUFFIX:
        raise ValueError(f"the trend chart is written as SVG: give a file name ending in .svg, "
                         f"not {Path(out).name!r}")
    xs = list(range(len(t.points)))
    ys = [p.value for p in t.points]
    errs = [p.sigma or 0.0 for p in t.points]
    c = t.chart
    span = [y - e for y, e in zip(ys, errs)] + [y + e for y, e in zip(ys, errs)]
    if c is not None:
        span += [c.lower, c.upper]
    if t.limit is not None:
        span.append(t.limit)
    yt, yn = nice_ticks(min(span), max(span), 6)
    title = f"{t.figure} {'across serials' if t.by == 'serial' else 'over time'}"
    fig = Figure(1080, 400, description=title)
    fig.text(90 + 380, 24, title, size=13, anchor="middle", weight="bold", cls="figure-title")
    ax = fig.axes((90, 40, 760, 290), (-0.5, max(len(xs) - 0.5, 0.5)), (yt[0], yt[-1]))
    if c is not None:
        ax.band([-0.5, len(xs) - 0.5], [c.lower, c.lower], [c.upper, c.upper], colour=GREEN,
                opacity=0.12, label=f"mean +/- 3 sigma ({c.sigma:.3g})")
        ax.hline(c.mean, colour="#000000", width=1.0, label=f"mean {c.mean:.4g}")
    if t.limit is not None:
        ax.hline(t.limit, colour=RED, width=1.2, dash="dashed", cls="limit",
                 label=f"spec limit ({'max' if t.sense == 'max' else 'min'}) {t.limit:g}")
    ax.errorbars(xs, ys, yerr=errs, colour=BLUE, cap=2)
    ax.line(xs, ys, colour=BLUE, width=0.8)
    ax.markers(xs, ys, shape="dot", size=5, colour=BLUE, label=t.figure, cls="values")
    bad = [i for i in xs if t.points[i].outlier]
    if bad:
        ax.markers(bad, [ys[i] for i in bad], shape="ring", size=14, colour=RED, width=1.5,
                   label="outside 3 sigma", cls="outliers")
    if t.by == "serial":
        labels = [p.serial for p in t.points]
    else:
        labels = [p.started_at.strftime("%Y-%m-%d") if p.started_at else "?" for p in t.points]
    step = max(1, -(-len(xs) // 8))  # at most 8 labels, each readable without rotation
    ax.ticks(xs[::step], yt, xnfrac=0, ynfrac=yn, xtexts=labels[::step], size=10,
             xlabel="serial" if t.by == "serial" else "run start (UTC date)",
             ylabel=f"{t.figure} ({t.unit})" if t.unit else t.figure)
    fig.legend(90 + 760 + 14, 40, ax.legend_entries, size=10)
    return fig.save(out)
