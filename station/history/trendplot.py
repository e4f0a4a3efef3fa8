"""The trend of one figure drawn as a control chart: values, mean, 3-sigma band, spec limit."""

from __future__ import annotations

from pathlib import Path

from station.history.queries import Trend


def plot_trend(t: Trend, out: Path) -> Path:
    """Write the chart as a PNG; outliers ringed in red, the spec limit dashed."""
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    fig = Figure(figsize=(9.5, 3.6), dpi=110)
    ax = fig.subplots()
    xs = list(range(len(t.points)))
    ys = [p.value for p in t.points]
    errs = [p.sigma or 0.0 for p in t.points]
    ax.errorbar(xs, ys, yerr=errs, fmt="o-", ms=3, lw=0.8, capsize=2, label=t.figure)
    if t.chart is not None:
        c = t.chart
        ax.axhline(c.mean, color="k", lw=1, label=f"mean {c.mean:.4g}")
        ax.axhspan(c.lower, c.upper, color="tab:green", alpha=0.12,
                   label=f"mean +/- 3 sigma ({c.sigma:.3g})")
        bad = [i for i in xs if t.points[i].outlier]
        if bad:
            ax.plot(bad, [ys[i] for i in bad], "o", ms=10, mfc="none", mec="red", mew=1.5,
                    label="outside 3 sigma")
    if t.limit is not None:
        ax.axhline(t.limit, color="red", ls="--", lw=1.2,
                   label=f"spec limit ({'max' if t.sense == 'max' else 'min'}) {t.limit:g}")
    if t.by == "serial":
        labels = [p.serial for p in t.points]
    else:
        labels = [p.started_at.strftime("%Y-%m-%d") if p.started_at else "?" for p in t.points]
    step = max(1, len(xs) // 12)
    ax.set_xticks(xs[::step], labels[::step], rotation=30, ha="right", fontsize=7)
    ax.set_ylabel(f"{t.figure} ({t.unit})" if t.unit else t.figure, fontsize=8)
    ax.set_title(f"{t.figure} {'across serials' if t.by == 'serial' else 'over time'}",
                 fontsize=9)
    ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    ax.grid(alpha=0.3)
    fig.tight_layout()
    fig.savefig(out)
    return out
