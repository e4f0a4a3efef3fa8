"""What the distortion SVGs show, read back from the files with the standard XML parser.

References: the result itself (one arrow per measured point, one cross per point not measured,
one dot per point in the radial plot); the drawn arrows must be an affine, equal-aspect image of
the error vectors times the exaggeration factor the legend states (the map claims to be a scale
drawing); the reference arrow must be drawn at that same scale. Tick values are Heckbert's
(Graphics Gems, 1990), checked in test_svg_plot.
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

from analysis.distortion import analyze_grid
from analysis.distortion_plots import (exaggeration_factor, reference_length,
                                       write_distortion_plots)
from analysis.geometry import BrownConrady, CameraGeometry, collimator_directions, project

SVG = "{http://www.w3.org/2000/svg}"
NOMINAL = CameraGeometry(640, 512, 17.0, 25.0)
NUM = r"(-?[\d.]+)"


@pytest.fixture(scope="module")
def result():
    """165-point grid, barrel k1 = -0.25, the first 5 points not measured, one point shifted
    by (1.5, -1.0) px so a local defect is flagged."""
    X, Y = np.meshgrid((np.arange(15) - 7) * 12.0, (np.arange(11) - 5) * 12.0)
    dirs = collimator_directions(np.column_stack([X.ravel(), Y.ravel()]), 500.0)
    truth = NOMINAL.replace(cx=322.0, cy=254.0, distortion=BrownConrady(k1=-0.25, p1=2e-4))
    meas = project(truth, dirs) + np.random.default_rng(0).normal(0, 0.02, (len(dirs), 2))
    meas[40] += (1.5, -1.0)
    return analyze_grid(meas[5:], dirs, NOMINAL, sigma_px=0.02, spec={"max_distortion_percent": 3.0})


@pytest.fixture(scope="module")
def svgs(result, tmp_path_factory) -> dict[str, ET.Element]:
    paths = write_distortion_plots(result, tmp_path_factory.mktemp("plots"), uut_serial="S1")
    return {name: ET.parse(Path(p)).getroot() for name, p in paths.items()}


def group(root: ET.Element, cls: str) -> list[ET.Element]:
    return [g for g in root.iter(f"{SVG}g") if g.get("class") == cls]


def arrow_ends(path: ET.Element) -> tuple[float, float, float, float]:
    """(x0, y0, tip x, tip y) of an arrow path 'M x0 y0 L ... M tip ...' (or 'M x y h0')."""
    moves = [(float(a), float(b)) for a, b in re.findall(rf"M{NUM} {NUM}", path.get("d"))]
    (x0, y0), (x1, y1) = moves[0], moves[-1]
    return x0, y0, x1, y1


@pytest.mark.parametrize(("name", "field"), [("distortion_map", "error_px"),
                                             ("distortion_residual", "residual_px")])
def test_one_arrow_per_measured_point_drawn_to_the_stated_scale(result, svgs, name, field):
    pts = result.points
    ok = pts.measured
    (vectors,) = group(svgs[name], "vectors")
    arrows = list(vectors)
    assert len(arrows) == int(ok.sum()) == 160
    assert sum(len(g) for g in group(svgs[name], "not-measured")) == 5
    assert sum(len(g) for g in group(svgs[name], "defects")) == int(pts.defect.sum()) == 1
    ends = np.array([arrow_ends(a) for a in arrows])
    # Tails: an affine image of the ideal positions with one scale on both axes, y downward.
    A = np.column_stack([pts.ideal_px[ok], np.ones(ok.sum())])
    cx, res_x, *_ = np.linalg.lstsq(A, ends[:, 0], rcond=None)
    cy, res_y, *_ = np.linalg.lstsq(A, ends[:, 1], rcond=None)
    scale = cx[0]
    assert scale > 0 and cy[1] == pytest.approx(scale, rel=1e-4)  # equal aspect, row downward
    assert abs(cx[1]) < 2e-5 and abs(cy[0]) < 2e-5  # 0.005 px rounding over 640 px: no rotation
    assert np.max(np.abs(A @ cx - ends[:, 0])) < 0.01  # coordinates written to 0.01 px
    # Tips: tail + factor x vector x scale, the factor the legend states.
    vec = getattr(pts, field)[ok]
    ideal = pts.ideal_px[ok]
    d = np.hypot(*(ideal[:, None, :] - ideal[None, :, :]).transpose(2, 0, 1))
    np.fill_diagonal(d, np.inf)
    factor = exaggeration_factor(vec, float(np.median(d.min(axis=1))))  # grid pitch
    legend_texts = ["".join(t.itertext()) for g in group(svgs[name], "legend")
                    for t in g.iter(f"{SVG}text")]
    (ref_text,) = [t for t in legend_texts if t.startswith("reference arrow")]
    stated = float(re.search(r"drawn x([\d.e+-]+)", ref_text).group(1))
    assert stated == pytest.approx(factor, rel=1e-9)
    drawn = ends[:, 2:] - ends[:, :2]
    expected = vec * stated * scale
    assert np.max(np.abs(drawn - expected)) < 0.02
    # The reference arrow: its stated length x factor x scale, horizontal.
    ref_px = float(re.search(r"arrow: ([\d.e+-]+) px", ref_text).group(1))
    mags = np.hypot(vec[:, 0], vec[:, 1])
    assert ref_px == reference_length(float(mags.max())) and ref_px <= mags.max()
    (ref_group,) = group(svgs[name], "legend-arrow")
    (ref_arrow,) = list(ref_group)
    x0, y0, x1, y1 = arrow_ends(ref_arrow)
    assert (x1 - x0, y1 - y0) == pytest.approx((ref_px * stated * scale, 0.0), abs=0.02)


def test_reference_length_is_the_largest_round_number_not_above_the_longest():
    assert reference_length(3.24) == 2.0
    assert reference_length(0.87) == 0.5
    assert reference_length(5.0) == 5.0
    assert reference_length(19.9) == 10.0
    assert reference_length(0.0) == 1.0  # nothing to show: a unit arrow


def test_radial_plot_has_every_point_and_the_fitted_curve(result, svgs):
    pts = result.points
    ok = pts.measured & (pts.radius_ideal_px > 0)
    stats = ok & pts.in_field_stats
    root = svgs["distortion_radial"]
    measured, excluded = group(root, "points-measured"), group(root, "points-excluded")
    assert len(measured) == len(excluded) == 2  # one per panel: radius and field angle
    assert [len(g) for g in measured] == [int(stats.sum())] * 2
    assert [len(g) for g in excluded] == [int((ok & ~stats).sum())] * 2
    curves = [p for p in root.iter(f"{SVG}path") if p.get("class") == "fitted-curve"]
    assert len(curves) == 2 and all(p.get("d").count("L") > 10 for p in curves)
    texts = ["".join(t.itertext()) for t in root.iter(f"{SVG}text")]
    assert "distortion, % of ideal image height" in texts
    assert "ideal radial distance from the principal point, px" in texts
    # y ticks: symmetric, nice, and covering 1.3 x the +/- 3 % limit (Heckbert: -4 .. 4, step 1)
    yt = [float(t.text.replace("\u2212", "-")) for t in root.iter(f"{SVG}text")
          if t.get("class") == "ytick"]
    assert sorted(set(yt)) == [float(k) for k in range(-4, 5)]
