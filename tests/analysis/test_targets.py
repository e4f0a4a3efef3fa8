"""Targets and their readers (analysis/targets.py, analysis/io.py)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import tifffile

from analysis.io import read_points_csv, read_tiff
from analysis.targets import (
    OpenAperture,
    PinholeGrid,
    SinglePinhole,
    SlantedEdge,
    target_from_mapping,
)


def test_grid_points_are_centred_row_major_at_pitch() -> None:
    # A 15 x 11 grid at pitch p spans (cols-1)*p by (rows-1)*p, centred on the axis (definition).
    g = PinholeGrid(rows=11, cols=15, pitch_mm=2.5, diameter_mm=0.2)
    pts = g.points_mm()
    assert pts.shape == (165, 2)
    assert pts[:, 0].min() == pytest.approx(-17.5) and pts[:, 0].max() == pytest.approx(17.5)
    assert pts[:, 1].min() == pytest.approx(-12.5) and pts[:, 1].max() == pytest.approx(12.5)
    np.testing.assert_allclose(pts.mean(axis=0), 0.0, atol=1e-12)
    assert g.labels()[1] == (0, 1) and g.labels()[15] == (1, 0)
    np.testing.assert_allclose(pts[1] - pts[0], [2.5, 0.0])
    hash(g)  # frozen targets key the renderer's cache


def test_mapping_builds_each_kind(tmp_path: Path) -> None:
    assert target_from_mapping({"kind": "open_aperture"}, tmp_path) == OpenAperture()
    assert target_from_mapping({"kind": "slanted_edge", "angle_deg": 5}, tmp_path) == \
        SlantedEdge(5.0)
    sp = target_from_mapping({"kind": "single_pinhole", "diameter_mm": 0.1}, tmp_path)
    assert sp == SinglePinhole(0.1)
    g = target_from_mapping({"kind": "pinhole_grid", "rows": 3, "cols": 4, "pitch_mm": 5,
                             "diameter_mm": 0.3, "offset_mm": [1, -1]}, tmp_path)
    np.testing.assert_allclose(g.points_mm()[0], [-7.5 + 1, -5 - 1])


def test_measured_grid_from_csv(tmp_path: Path) -> None:
    (tmp_path / "grid.csv").write_text("x_mm,y_mm,row,col\n-5.01,-4.98,0,0\n5.02,-5.00,0,1\n"
                                       "-4.99,5.01,1,0\n5.00,4.99,1,1\n")
    g = target_from_mapping({"kind": "pinhole_grid", "diameter_mm": 0.2,
                             "measured_csv": "grid.csv"}, tmp_path)
    assert (g.rows, g.cols) == (2, 2)
    np.testing.assert_allclose(g.points_mm()[1], [5.02, -5.00])
    assert g.labels() == [(0, 0), (0, 1), (1, 0), (1, 1)]


def test_errors_name_the_key_and_the_fix(tmp_path: Path) -> None:
    with pytest.raises(ValueError, match=r"kind: 'grid' is not a target kind; use one of"):
        target_from_mapping({"kind": "grid"}, tmp_path)
    with pytest.raises(ValueError) as err:
        target_from_mapping({"kind": "pinhole_grid", "rows": 2.5, "pitch_mm": -1,
                             "diameter_mm": 0.2, "colour": "red"}, tmp_path)
    text = str(err.value)
    for part in ("rows: expected an integer", "cols: missing", "pitch_mm: must be > 0",
                 "colour: not a key"):
        assert part in text
    (tmp_path / "bad.csv").write_text("x_mm,y_mm\n1.0,2.0\nabc,3\n")
    with pytest.raises(ValueError, match=r"bad\.csv:3: x_mm/y_mm must be finite numbers"):
        target_from_mapping({"kind": "pinhole_grid", "diameter_mm": 0.2,
                             "measured_csv": "bad.csv"}, tmp_path)
    with pytest.raises(ValueError, match="not found"):
        read_points_csv(tmp_path / "none.csv")


def test_read_tiff_round_trip(tmp_path: Path) -> None:
    # tifffile is the reference writer; the stack must come back bit-identical, [frame, row, col].
    stack = np.arange(2 * 3 * 4, dtype=np.uint16).reshape(2, 3, 4)
    tifffile.imwrite(tmp_path / "s.tif", stack)
    np.testing.assert_array_equal(read_tiff(tmp_path / "s.tif"), stack)
