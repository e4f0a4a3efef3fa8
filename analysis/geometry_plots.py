"""Pictures of the geometric family: boresight scatter, alignment convergence, FOV edges.

PNG files through matplotlib's Agg backend, imported inside each function so that importing this
module (or running an analysis without plots) never loads matplotlib. Each function writes one
file atomically enough for a run folder (a temporary name, then a rename) and returns its path.

Axis conventions: boresight plots show azimuth to the right and elevation up (mrad), as the UUT's
line of sight would move on a screen in front of it; convergence shows the residual (px) on a
log scale against the iteration.
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

__all__ = ["plot_boresight_scatter", "plot_alignment_convergence", "plot_fov_edges"]


def _pyplot() -> Any:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _save(fig: Any, path: Path | str) -> Path:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.stem + ".tmp.png")
    fig.savefig(tmp, dpi=110, bbox_inches="tight")
    os.replace(tmp, path)
    return path


def plot_boresight_scatter(points_mrad: Sequence[tuple[float, float]],
                           sigmas_mrad: Sequence[tuple[float, float]], labels: Sequence[str],
                           tolerance_mrad: float | None, path: Path | str, *,
                           title: str = "Boresight relative to the mount") -> Path:
    """Each boresight (az, el) mrad with its 2-sigma error bars, the tolerance circle (the
    ``max_boresight_error_mrad`` limit) and the mount's zero."""
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(5.5, 5.0))
    for (a, e), (sa, se), lab in zip(points_mrad, sigmas_mrad, labels):
        ax.errorbar([a], [e], xerr=[2 * sa], yerr=[2 * se], fmt="o", capsize=3, label=lab)
    extent = max([abs(v) for p in points_mrad for v in p] + [tolerance_mrad or 0.0, 0.1]) * 1.25
    if tolerance_mrad:
        circle = plt.Circle((0.0, 0.0), tolerance_mrad, fill=False, ls="--", color="tab:red",
                            label=f"limit {tolerance_mrad:g} mrad")
        ax.add_patch(circle)
    ax.axhline(0.0, color="0.7", lw=0.8)
    ax.axvline(0.0, color="0.7", lw=0.8)
    ax.set_xlim(-extent, extent)
    ax.set_ylim(-extent, extent)
    ax.set_aspect("equal")
    ax.set_xlabel("azimuth (mrad)")
    ax.set_ylabel("elevation (mrad)")
    ax.set_title(title + "\n(error bars: 2 sigma)")
    ax.legend(fontsize=7, loc="lower left")
    if points_mrad:
        # Inset around the measurements: their spread and error bars at a readable scale.
        pts = [p for p in points_mrad]
        ca = sum(p[0] for p in pts) / len(pts)
        ce = sum(p[1] for p in pts) / len(pts)
        half = max([abs(p[0] - ca) for p in pts] + [abs(p[1] - ce) for p in pts]
                   + [4 * max(s) for s in sigmas_mrad] + [1e-3]) * 1.3
        inset = ax.inset_axes([0.6, 0.02, 0.38, 0.38])
        for (a, e), (sa, se) in zip(points_mrad, sigmas_mrad):
            inset.errorbar([a], [e], xerr=[2 * sa], yerr=[2 * se], fmt="o", ms=3, capsize=2)
        inset.set_xlim(ca - half, ca + half)
        inset.set_ylim(ce - half, ce + half)
        inset.set_aspect("equal")
        inset.tick_params(labelsize=6)
        inset.set_title("zoom", fontsize=7)
    try:
        return _save(fig, path)
    finally:
        plt.close(fig)


def plot_alignment_convergence(iterations: Sequence[Mapping[str, Any]], tolerance_px: float,
                               path: Path | str) -> Path:
    """Residual offset (px, log scale) per iteration with the tolerance line, and the spot's
    path on the detector toward the reference pixel. `iterations` are
    ``AlignmentIteration.to_dict()`` records."""
    plt = _pyplot()
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(10.0, 4.2))
    n = [int(it["iteration"]) for it in iterations]
    r = [max(float(it["residual_px"]), 1e-4) for it in iterations]
    ax1.semilogy(n, r, "o-")
    ax1.axhline(tolerance_px, color="tab:red", ls="--", label=f"tolerance {tolerance_px:g} px")
    ax1.set_xlabel("iteration")
    ax1.set_ylabel("spot offset from the reference pixel (px)")
    ax1.set_xticks(n)
    ax1.legend(fontsize=8)
    ax1.set_title("Alignment convergence")
    xs = [float(it["offset_px"][0]) for it in iterations]
    ys = [float(it["offset_px"][1]) for it in iterations]
    ax2.plot(xs, ys, "o-")
    for k, (x, y) in enumerate(zip(xs, ys), start=1):
        ax2.annotate(str(k), (x, y), textcoords="offset points", xytext=(4, 4), fontsize=8)
    ax2.add_patch(plt.Circle((0.0, 0.0), tolerance_px, fill=False, color="tab:red", ls="--"))
    ax2.invert_yaxis()  # rows grow downward, as the image is seen
    ax2.set_aspect("equal", adjustable="datalim")
    ax2.set_xlabel("offset x (px)")
    ax2.set_ylabel("offset y (px, down)")
    ax2.set_title("Spot path on the detector")
    try:
        return _save(fig, path)
    finally:
        plt.close(fig)


def plot_fov_edges(scan: Any, path: Path | str) -> Path:
    """Flux fraction against stage angle for each edge search (left, right, top, bottom), the
    one-half crossing and the edge found (scan-mode FOV, `analysis.fov_scan.ScanFov`)."""
    plt = _pyplot()
    fig, axes = plt.subplots(2, 2, figsize=(9.0, 6.5))
    for ax, name in zip(axes.ravel(), ("left", "right", "top", "bottom")):
        edge = scan.edges[name]
        probes = sorted(edge.probes, key=lambda p: p.angle_deg)
        ax.errorbar([p.angle_deg for p in probes], [p.fraction for p in probes],
                    yerr=[2 * p.sigma for p in probes], fmt="o", ms=3, capsize=2)
        ax.axhline(0.5, color="0.6", ls=":")
        ax.axvline(edge.angle_deg, color="tab:red", ls="--",
                   label=f"edge {edge.angle_deg:.4f} ± {edge.sigma_deg:.4f} deg")
        # Inset: the last bracket, where the edge is decided.
        near = [p for p in probes if abs(p.angle_deg - edge.angle_deg) < 0.2] or probes
        inset = ax.inset_axes([0.36, 0.3, 0.3, 0.4])
        inset.errorbar([p.angle_deg for p in near], [p.fraction for p in near],
                       yerr=[2 * p.sigma for p in near], fmt="o", ms=2, capsize=1)
        inset.axhline(0.5, color="0.6", ls=":")
        inset.axvline(edge.angle_deg, color="tab:red", ls="--")
        inset.tick_params(labelsize=6)
        ax.set_title(f"{name} edge ({'azimuth' if name in ('left', 'right') else 'elevation'})")
        ax.set_xlabel("stage angle (deg)")
        ax.set_ylabel("flux fraction on the detector")
        ax.legend(fontsize=7)
    fov = scan.fov
    diagonal = (f"D {fov.d_deg:.3f} ± {fov.sigma_d_deg:.3f} deg (corners)"
                if getattr(scan, "corners", None) else f"D {fov.d_deg:.3f} deg (derived)")
    fig.suptitle(f"Field of view by edge bisection: H {fov.h_deg:.3f} ± {fov.sigma_h_deg:.3f}, "
                 f"V {fov.v_deg:.3f} ± {fov.sigma_v_deg:.3f} deg, {diagonal}")
    fig.tight_layout()
    try:
        return _save(fig, path)
    finally:
        plt.close(fig)
