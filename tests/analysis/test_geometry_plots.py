"""Geometry plots (analysis/geometry_plots.py, SVG) read back with the standard XML parser.

References: the inputs themselves (one marker per point, iteration and probe); the tolerance
circle must be a circle of the stated radius on equal-aspect axes (a scale drawing); the log axis
ticks are whole decades; tick steps are Heckbert's nice numbers (Graphics Gems, 1990).
"""

from __future__ import annotations

import re
import subprocess
import sys
import xml.etree.ElementTree as ET

import pytest

from analysis.fov_scan import EdgeProbe, EdgeSearch, ScanFov
from analysis.geometry_plots import (plot_alignment_convergence, plot_boresight_scatter,
                                     plot_fov_edges)

SVG = "{http://www.w3.org/2000/svg}"


def group(root: ET.Element, cls: str) -> list[ET.Element]:
    return [g for g in root.iter(f"{SVG}g") if g.get("class") == cls]


def texts(root: ET.Element, cls: str) -> list[str]:
    return ["".join(t.itertext()) for t in root.iter(f"{SVG}text") if t.get("class") == cls]


def test_boresight_scatter_draws_each_point_and_the_limit_to_scale(tmp_path) -> None:
    pts = [(1.2, -0.4), (1.25, -0.38), (0.9, 0.1)]
    sig = [(0.01, 0.02), (0.01, 0.01), (0.03, 0.03)]
    root = ET.parse(plot_boresight_scatter(pts, sig, ["a", "b", "c"], 3.0,
                                           tmp_path / "b.svg", title="Boresight of S<1>")).getroot()
    assert sum(len(g) for g in group(root, "points")) == 3
    assert sum(len(g) for g in group(root, "zoom-points")) == 3
    (circle,) = [e for e in root.iter(f"{SVG}ellipse") if e.get("class") == "limit"]
    rx, ry = float(circle.get("rx")), float(circle.get("ry"))
    assert rx == pytest.approx(ry, rel=1e-3)  # equal aspect: a circle, not an ellipse
    # 400 px span over 2 * 1.25 * 3 mrad -> the 3 mrad limit is 160 px
    assert rx == pytest.approx(400 / (2 * 1.25 * 3.0) * 3.0, abs=0.02)
    assert "Boresight of S<1>" in ["".join(t.itertext()) for t in root.iter(f"{SVG}text")]


def test_alignment_log_axis_has_decades_and_one_marker_per_iteration(tmp_path) -> None:
    its = [{"iteration": 1, "residual_px": 2.8, "offset_px": [2.3, -1.6]},
           {"iteration": 2, "residual_px": 0.05, "offset_px": [0.04, -0.03]},
           {"iteration": 3, "residual_px": 0.002, "offset_px": [0.001, 0.002]}]
    root = ET.parse(plot_alignment_convergence(its, 0.2, tmp_path / "a.svg")).getroot()
    assert sum(len(g) for g in group(root, "iterations")) == 3
    assert sum(len(g) for g in group(root, "path")) == 3
    assert texts(root, "ytick")[:4] == ["0.001", "0.01", "0.1", "1"]  # log10 2.8 -> up to 10
    # the tolerance line sits at log10(0.2) between the 0.1 and 1 ticks, at the right fraction
    ticks = [e for e in root.iter(f"{SVG}text") if e.get("class") == "ytick"]
    y01, y1 = (float(t.get("y")) for t in ticks[2:4])
    (tol,) = [e for e in root.iter(f"{SVG}path") if e.get("class") == "tolerance"]
    y_tol = float(re.findall(r"M[-\d.]+ ([-\d.]+)", tol.get("d"))[0])
    shift = 11 * 0.35  # tick labels sit 0.35 em below their tick
    assert (y01 - shift - y_tol) / (y01 - y1) == pytest.approx(0.30103, abs=0.01)


def test_fov_edges_one_marker_per_probe(tmp_path) -> None:
    from analysis.fov import FieldOfView

    def search(a0: float, sign: float) -> EdgeSearch:
        probes = tuple(EdgeProbe(a0 + sign * d, 1.0 if d < 0 else 0.0, 0.01)
                       for d in (-2.0, -0.5, -0.1, 0.05, 0.3, 1.0))
        return EdgeSearch(a0, 0.001, probes)

    edges = {"left": search(12.4, 1), "right": search(-12.3, -1),
             "top": search(-9.8, -1), "bottom": search(9.9, 1)}
    fov = FieldOfView(24.7, 19.7, 31.5, 0.002, 0.002, 0.004, method="scan")
    root = ET.parse(plot_fov_edges(ScanFov(fov, edges, (0.0, 0.0)), tmp_path / "f.svg")).getroot()
    assert sum(len(g) for g in group(root, "probes")) == 4 * 6
    assert sum(1 for e in root.iter(f"{SVG}path") if e.get("class") == "edge") == 4
    assert any("D 31.500 deg (derived)" in t for t in texts(root, "figure-title"))


def test_geometry_plots_import_no_plotting_library(tmp_path) -> None:
    code = ("import sys\nfrom analysis.geometry_plots import plot_boresight_scatter\n"
            f"plot_boresight_scatter([(0.1, 0.2)], [(0.01, 0.01)], ['a'], 1.0, {str(tmp_path / 'b.svg')!r})\n"
            "print('matplotlib' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
