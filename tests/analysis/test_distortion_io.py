"""Output contract (distortion.json, distortion_points.csv) and the plots."""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest

from analysis.distortion import analyze_grid
from analysis.distortion_plots import exaggeration_factor, write_distortion_plots
from analysis.geometry import BrownConrady, CameraGeometry, collimator_directions, project
from analysis.results_io import write_distortion_results

NOMINAL = CameraGeometry(640, 512, 17.0, 25.0)


@pytest.fixture(scope="module")
def result():
    X, Y = np.meshgrid((np.arange(15) - 7) * 12.0, (np.arange(11) - 5) * 12.0)
    dirs = collimator_directions(np.column_stack([X.ravel(), Y.ravel()]), 500.0)
    truth = NOMINAL.replace(cx=322.0, cy=254.0, distortion=BrownConrady(k1=-0.25, p1=2e-4))
    meas = project(truth, dirs) + np.random.default_rng(0).normal(0, 0.02, (len(dirs), 2))
    return analyze_grid(meas[5:], dirs, NOMINAL, sigma_px=0.02, spec={"max_distortion_percent": 3.0})


def test_json_and_csv_contract(result, tmp_path):
    jpath, cpath = write_distortion_results(result, tmp_path / "results")
    doc = json.loads(jpath.read_text())
    s, m = doc["summary"], doc["model"]
    assert s["classification"] in ("barrel", "pincushion", "mustache", "none")
    assert s["max_distortion_percent"] == pytest.approx(result.max_distortion_percent, rel=1e-12)
    # Boresight offset = principal point - detector centre ((w-1)/2, (h-1)/2), (x, y).
    assert s["boresight_offset_px"][0] == pytest.approx(m["cx_px"] - 319.5, abs=1e-9)
    assert s["boresight_offset_px"][1] == pytest.approx(m["cy_px"] - 255.5, abs=1e-9)
    # OpenCV order [k1, k2, p1, p2, k3] (calib3d documentation).
    assert m["opencv_dist_coeffs"] == pytest.approx([m["k1"], m["k2"], m["p1"], m["p2"], m["k3"]])
    assert m["k1"] == pytest.approx(-0.25, abs=4 * m["uncertainty"]["k1"])
    for key in ("skew_deg",):
        assert key in s
    for key in ("fx_px", "fy_px", "cx_px", "cy_px", "k1", "k2", "k3", "p1", "p2"):
        assert isinstance(m[key], float)
    assert doc["verdicts"][0]["passed"] is True
    rows = list(csv.DictReader(cpath.open()))
    assert len(rows) == len(result.points) == 165
    # The 5 points left out read as not measured, with empty measured columns.
    assert sum(r["measured"] == "0" for r in rows) == 5
    k = 100
    assert float(rows[k]["distortion_percent"]) == pytest.approx(result.points.distortion_percent[k], rel=1e-5)
    assert not list(tmp_path.joinpath("results").glob("*.tmp"))  # atomic: no temp files left


def test_plots_written_as_svg_with_readable_factor(result, tmp_path):
    import xml.etree.ElementTree as ET

    paths = write_distortion_plots(result, tmp_path / "plots")
    assert sorted(p.name for p in paths.values()) == [
        "distortion_map.svg", "distortion_radial.svg", "distortion_residual.svg"]
    for p in paths.values():
        root = ET.parse(p).getroot()  # well-formed XML (W3C SVG 1.1: root <svg> in its namespace)
        assert root.tag == "{http://www.w3.org/2000/svg}svg"
        assert float(root.get("width")) > 500 and float(root.get("height")) > 300
    assert not list((tmp_path / "plots").glob("*.tmp"))  # written atomically
    # Exaggeration: the longest vector drawn between 0.1 and 0.5 grid pitch (1-2-5 steps).
    v = np.array([[3.0, 4.0], [0.1, 0.0]])
    f = exaggeration_factor(v, 40.0)
    assert 0.1 * 40 <= 5.0 * f <= 0.5 * 40


def test_undistortion_map_file_matches_opencv(result, tmp_path):
    # The exported map must be what OpenCV builds from the same fitted K and coefficients
    # (cv2.initUndistortRectifyMap, calib3d documentation), so a user can cv2.remap with it.
    # The fit includes a small skew term OpenCV's K ignores, so compare where skew shifts < 0.01 px.
    import cv2
    import tifffile

    from analysis.results_io import write_undistortion_map

    path = write_undistortion_map(result, tmp_path)
    map_x, map_y = tifffile.imread(path)
    g = result.model.geometry.replace(skew_deg=0.0)
    k = np.array([[g.fx, 0, g.principal_point[0]], [0, g.fy, g.principal_point[1]], [0, 0, 1]])
    ref_x, ref_y = cv2.initUndistortRectifyMap(k, g.distortion.as_opencv(), None, k,
                                               (g.width, g.height), cv2.CV_32FC1)
    skew_px = abs(np.tan(np.radians(result.model.geometry.skew_deg))) * g.height * 2
    assert map_x.shape == (512, 640) and map_y.shape == (512, 640)
    assert np.max(np.abs(map_x - ref_x)) < 2e-3 + skew_px
    assert np.max(np.abs(map_y - ref_y)) < 2e-3


def test_json_verdicts_headline_and_uncertainties(result, tmp_path):
    """Every figure a verdict uses carries a sigma; verdicts follow analysis.verdicts'
    guarded acceptance (GUM/ILAC-G8 decision rule, k = 2); one headline in the JSON."""
    doc = json.loads(write_distortion_results(result, tmp_path / "r")[0].read_text())
    s = doc["summary"]
    (v,) = doc["verdicts"]
    assert v["key"] == v["name"] == "max_distortion_percent"
    assert v["sigma"] > 0 and v["status"] == "PASS" and v["margin"] == pytest.approx(3.0 - v["value"])
    # The verdict judges the fitted-model maximum, not the worst noisy point.
    assert v["value"] == pytest.approx(abs(s["max_distortion_percent"]))
    assert s["max_distortion_sigma_percent"] > 0 and s["worst_point_sigma_percent"] > 0
    assert s["headline"] == doc["headline"]
    assert f"{s['max_distortion_percent']:+.2f}"[:4] in s["headline"]["text"]
    # Corners: measured or extrapolated, and how far beyond the measured field.
    tl = s["field_points"]["top_left"]
    assert tl["extrapolated"] is True and tl["beyond_measured_field_px"] > 0
    assert tl["sigma_percent"] > 0
    assert "extrapolated" in tl["basis"]
    assert any("fitted" in t or "held" in t for t in doc["model"]["term_choice"])


def test_every_plot_carries_verdict_headline_and_footer(result, tmp_path):
    import xml.etree.ElementTree as ET

    from analysis.distortion_plots import headline_text

    paths = write_distortion_plots(result, tmp_path / "plots", uut_serial="OW-0042",
                                   run_id="20260101T000000Z", date="2026-01-01")
    assert len(paths) == 3
    texts = {}
    for name, p in paths.items():
        root = ET.parse(p).getroot()
        texts[name] = ["".join(t.itertext()) for t in root.iter("{http://www.w3.org/2000/svg}text")]
        title = [t for t in texts[name] if headline_text(result) in t]
        assert title and title[0].startswith("PASS")
        assert any("OW-0042" in t and "20260101T000000Z" in t and "2026-01-01" in t
                   for t in texts[name])
    # The radial plot draws the +/- 3 % spec limit and names it in its legend.
    assert any("limit max_distortion_percent (+/-3 %)" in t for t in texts["distortion_radial"])
    # Axis labels carry their units.
    assert "x (column), px" in texts["distortion_map"]
    assert "field angle, deg" in texts["distortion_radial"]
