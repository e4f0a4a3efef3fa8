"""Pictures of a distortion result (matplotlib, Agg backend, PNG files).

Axis order: plots show the image as seen, x = column to the right, y = row downward.
Every plot carries the run's one headline number (the same text as the JSON's "headline"), the
overall verdict in its title when spec limits were judged, and a footer with the UUT serial, the
run id and the date when given. The radial plot draws the spec limit lines.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from analysis.distortion import DistortionResult  # noqa: E402
from analysis.verdicts import overall  # noqa: E402


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


def _decorate(fig: plt.Figure, result: DistortionResult, what: str, labels: PlotLabels | None) -> None:
    fig.suptitle(f"{verdict_word(result)}: {what} - {headline_text(result)}", fontsize=10)
    fig.text(0.01, 0.005, (labels or PlotLabels()).footer(), fontsize=8, color="0.3", ha="left", va="bottom")

__all__ = ["PlotLabels", "exaggeration_factor", "headline_text", "plot_distortion_map", "plot_radial_curve",
           "plot_residual_map", "verdict_word", "write_distortion_plots"]


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


def _vector_map(result: DistortionResult, vectors: np.ndarray, title: str, colour_label: str,
                path: Path, mark_defects: bool, labels: PlotLabels | None = None) -> Path:
    pts = result.points
    base = pts.ideal_px
    ok = pts.measured
    factor = exaggeration_factor(vectors[ok], _pitch(base[ok]))
    mag = np.hypot(vectors[:, 0], vectors[:, 1])
    g = result.model.geometry
    fig, ax = plt.subplots(figsize=(8, 6.4), dpi=100)
    ax.add_patch(plt.Rectangle((-0.5, -0.5), g.width, g.height, fill=False, lw=1.0, ec="0.4"))
    q = ax.quiver(base[ok, 0], base[ok, 1], vectors[ok, 0] * factor, vectors[ok, 1] * factor, mag[ok],
                  angles="xy", scale_units="xy", scale=1.0, cmap="viridis", width=0.004)
    ax.plot(base[~ok, 0], base[~ok, 1], "x", color="0.6", ms=5, label="not measured")
    if mark_defects and pts.defect.any():
        d = pts.defect
        ax.plot(pts.measured_px[d, 0], pts.measured_px[d, 1], "o", mfc="none", mec="red", ms=12, label="local defect")
    ax.plot(*result.model.geometry.principal_point, "+", color="red", ms=12, mew=1.5, label="principal point")
    fig.colorbar(q, ax=ax, label=colour_label)
    ax.set_xlim(-0.05 * g.width, 1.05 * g.width)
    ax.set_ylim(1.05 * g.height, -0.05 * g.height)
    ax.set_aspect("equal")
    ax.set_xlabel("x (column), px")
    ax.set_ylabel("y (row), px")
    ax.set_title(title)
    ax.text(0.01, 0.01, f"vectors exaggerated x{factor:g}", transform=ax.transAxes, fontsize=10,
            bbox={"fc": "white", "ec": "0.5"})
    ax.legend(loc="upper right", fontsize=8)
    _decorate(fig, result, title.split(" (")[0], labels)
    fig.tight_layout(rect=(0, 0.03, 1, 0.95))
    fig.savefig(path)
    plt.close(fig)
    return path


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


def plot_radial_curve(result: DistortionResult, path: str | os.PathLike[str],
                      labels: PlotLabels | None = None) -> Path:
    """Local percent distortion against image height and field angle: points, fitted curve with
    its 1-sigma band, and the spec limit lines (+/- limit) of the percent-distortion keys."""
    pts = result.points
    c = result.curve
    ok = pts.measured & (pts.radius_ideal_px > 0)
    stats = ok & pts.in_field_stats
    limit_verdicts = [v for v in result.verdicts if v.unit == "%" and "distortion" in v.key]
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(11, 4.8), dpi=100)
    for ax, xp, xc, lab in ((a1, pts.radius_ideal_px, c.radius_px, "ideal radial distance from the principal point, px"),
                            (a2, pts.field_angle_deg, c.field_angle_deg, "field angle, deg")):
        ax.plot(xp[stats], pts.distortion_percent[stats], ".", color="C0", label="measured points")
        ax.plot(xp[ok & ~stats], pts.distortion_percent[ok & ~stats], ".", color="0.7",
                label="near centre / defect (not in statistics)")
        inside = c.radius_px <= c.measured_radius_max_px
        ax.plot(xc[inside], c.distortion_percent[inside], "-", color="C3", label="fitted radial curve")
        ax.plot(xc[~inside], c.distortion_percent[~inside], "--", color="C3", label="fitted curve, extrapolated")
        if c.sigma_percent is not None and np.isfinite(c.sigma_percent).all():
            ax.fill_between(xc, c.distortion_percent - c.sigma_percent, c.distortion_percent + c.sigma_percent,
                            color="C3", alpha=0.2, lw=0, label="fitted curve +/- 1 sigma")
        for v, style in zip(limit_verdicts, ("-.", ":")):
            for sign in (1, -1):
                ax.axhline(sign * v.limit, color="C1", ls=style, lw=1.2,
                           label=f"limit {v.key} (+/-{v.limit:g} %)" if sign == 1 else None)
        ax.axhline(0.0, color="0.5", lw=0.8)
        ax.set_xlabel(lab)
        ax.set_ylabel("distortion, % of ideal image height")
        ax.grid(alpha=0.3)
    lo, hi = np.nanpercentile(pts.distortion_percent[stats], [0, 100]) if stats.any() else (-1.0, 1.0)
    span = max(abs(lo), abs(hi), float(np.max(np.abs(c.distortion_percent))), 0.05,
               *(v.limit for v in limit_verdicts))
    for ax in (a1, a2):
        ax.set_ylim(-1.3 * span, 1.3 * span)
    a1.legend(fontsize=8)
    a1.set_title(f"{result.classification.label}: {result.classification.reason}", fontsize=7)
    _decorate(fig, result, "Radial distortion", labels)
    fig.tight_layout(rect=(0, 0.03, 1, 0.95))
    fig.savefig(path)
    plt.close(fig)
    return Path(path)


def write_distortion_plots(result: DistortionResult, folder: str | os.PathLike[str], *,
                           uut_serial: str | None = None, run_id: str | None = None,
                           date: str | None = None) -> dict[str, Path]:
    """All three PNGs into folder (normally <run>/plots); returns name -> path.

    uut_serial, run_id and date go in the footer of every plot.
    """
    d = Path(folder)
    d.mkdir(parents=True, exist_ok=True)
    labels = PlotLabels(uut_serial, run_id, date)
    return {
        "distortion_map": plot_distortion_map(result, d / "distortion_map.png", labels),
        "distortion_radial": plot_radial_curve(result, d / "distortion_radial.png", labels),
        "distortion_residual": plot_residual_map(result, d / "distortion_residual.png", labels),
    }
