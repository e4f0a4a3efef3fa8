"""UUT file loading (station/inputs/uut_file.py) and the nominal camera it implies (analysis/uut.py)."""

from __future__ import annotations

from pathlib import Path

import pytest

from station.inputs.uut_file import UutFileError, demo_uut_path, load_uut


def test_demo_uut_loads_with_the_data_sheet_values() -> None:
    uut = load_uut(demo_uut_path())
    assert (uut.model, uut.serial) == ("nightbench demo imager LW-640", "DEMO-0042")
    assert (uut.width, uut.height, uut.bit_depth) == (640, 512, 14)
    assert uut.band_um == (8.0, 12.0)
    assert uut.spec_limits["netd_mk"] == 50.0
    g = uut.nominal_geometry()
    # IFOV = pitch / f = 17 um / 25 mm = 0.68 mrad; horizontal FOV = 2 atan(w p / 2 f)
    # = 2 atan(640 * 0.017 / 50) = 24.6 deg (rectilinear geometry, definition).
    assert g.ifov_mrad == pytest.approx(0.68, rel=1e-12)
    assert g.principal_point == (319.5, 255.5)
    assert g.distortion.is_zero


def test_every_problem_is_reported_with_its_line(tmp_path: Path) -> None:
    bad = tmp_path / "bad.yaml"
    bad.write_text(
        "model: Test\n"                 # 1
        "serial: X1\n"                  # 2
        "format:\n"                     # 3
        "  width: 640.5\n"              # 4
        "  height: 512\n"               # 5
        "  pixel_pitch_um: -17\n"       # 6
        "optics:\n"                     # 7
        "  focal_length_mm: 25\n"       # 8
        "  f_number: 1\n"               # 9
        "  projection: fisheye\n"       # 10
        "band_um: [12, 8]\n"            # 11
        "frame_rate_hz: 30\n"           # 12
        "bit_depth: 14\n"               # 13
        "spec_limits:\n"                # 14
        "  netd_mk: low\n"              # 15
        "colour: red\n")                # 16
    with pytest.raises(UutFileError) as err:
        load_uut(bad)
    lines = str(err.value).splitlines()
    expected = {4: "format.width", 6: "format.pixel_pitch_um", 10: "optics.projection",
                11: "band_um", 15: "spec_limits.netd_mk", 16: "colour: unknown key"}
    assert len(lines) == len(expected)
    for line_no, what in expected.items():
        assert any(ln.startswith(f"{bad}:{line_no}:") and what in ln for ln in lines), (line_no,
                                                                                       lines)
    assert isinstance(err.value, ValueError)


def test_missing_section_and_syntax_error(tmp_path: Path) -> None:
    f = tmp_path / "short.yaml"
    f.write_text("model: A\nserial: B\nband_um: [3, 5]\nframe_rate_hz: 60\nbit_depth: 14\n")
    with pytest.raises(UutFileError, match=r"format: missing section.*\n.*optics: missing"):
        load_uut(f)
    f.write_text("model: [A\n")
    with pytest.raises(UutFileError, match="YAML syntax error"):
        load_uut(f)
