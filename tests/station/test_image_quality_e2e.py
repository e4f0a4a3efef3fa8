"""The image-quality recipe end to end on the simulated bench, against the camera's truth.

One in-process `nightbench run image-quality` (the built-in simulated bench, simulated time),
then its results are compared with the simulated camera's truth file
(station/data/demo_camera_truth.yaml, read through simulators.camera_truth; the analysis never
reads it):
- NETD: the truth states 50.0 mK at 30 C; the measurement must agree within 2 of its own
  reported 1-sigma uncertainties (coverage factor k = 2, GUM JCGM 100:2008 6.3); the other
  built-in recipes that measure NETD: tests/station/test_netd_recipes.py.
- MTF at Nyquist at the centre: within 0.02 of the closed-form system MTF (diffraction x
  Gaussian x pixel aperture, analysis.optics) at 0.5 cycles/pixel in the edge's direction.
- Uniformity: the two-point gain and offset non-uniformity equal the renderer's gain and offset
  patterns.
- 3-D noise: the random component equals the renderer's temporal noise (plus ADC rounding).
- Bad pixels: every planted pixel (dead, hot, noisy, non-responsive), positions equal to those
  the renderer draws from the truth file's own seed.
- Re-analysis (`nightbench analyze NAME RUN`) reproduces the run's own result files to 1e-9
  (same frames, same code), and `analyze mtf --frame` on the saved edge frame reproduces the
  run's centre MTF to 1e-9.
"""

from __future__ import annotations

import contextlib
import io
import json
import math
from pathlib import Path

import numpy as np
import pytest
import tifffile
import yaml

from simulators.camera_render import CameraRenderer
from simulators.camera_truth import truth_from_mapping
from station.cli.main import main
from station.inputs.config import BUILTIN_DIR

SAME = 1e-9
TRUTH = truth_from_mapping(yaml.safe_load((BUILTIN_DIR / "demo_camera_truth.yaml")
                                          .read_text(encoding="utf-8")))


def _run(root: Path, *args: str) -> Path:
    runs = root / "runs"
    with contextlib.redirect_stdout(io.StringIO()):
        code = main(["run", *args, "--runs", str(runs), "--plain"])
    assert code in (0, 1), code  # 1: the unit judged FAILED/MARGINAL is not a test failure
    (folder,) = [p for p in runs.iterdir() if p.is_dir()]
    return folder


@pytest.fixture(scope="module")
def iq_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return _run(tmp_path_factory.mktemp("iq"), "image-quality")


def _json(path: Path) -> dict:
    return json.loads(path.read_text(encoding="utf-8"))


def _numbers(a: object, b: object, where: str = "") -> None:
    if isinstance(a, dict):
        assert isinstance(b, dict) and set(a) == set(b), where
        for k in a:
            _numbers(a[k], b[k], f"{where}.{k}")
    elif isinstance(a, list):
        assert isinstance(b, list) and len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b)):
            _numbers(x, y, f"{where}[{i}]")
    elif isinstance(a, float):
        if math.isnan(a):
            assert isinstance(b, float) and math.isnan(b), where
        else:
            assert b == pytest.approx(a, abs=SAME, rel=SAME), where
    else:
        assert a == b, where


def test_netd_recovers_the_truth_at_30c(iq_run: Path) -> None:
    netd = _json(iq_run / "results" / "netd.json")
    assert netd["conditions"]["source_c"] == 30.0 and netd["conditions"]["brackets_source"]
    truth_mk = 1000.0 * TRUTH.netd_k  # 50.0 mK at netd_reference_c = 30 C
    assert TRUTH.netd_reference_c == 30.0
    assert abs(netd["netd_mk"] - truth_mk) <= 2.0 * netd["netd_sigma_mk"]
    assert netd["bad_pixels_masked"] > 0


def test_mtf_at_nyquist_matches_the_closed_form(iq_run: Path) -> None:
    mtf = _json(iq_run / "results" / "mtf.json")
    assert len(mtf["edges"]) == 3
    for edge in mtf["edges"]:
        # frequencies across the edge, at the edge's slant from the pixel axis
        truth = float(TRUTH.system_mtf(0.5, edge["edge_angle_deg"]))
        assert abs(edge["mtf_at_nyquist"] - truth) <= 0.02, edge["capture"]
    fields = sorted(e["conditions"]["field_position"] for e in mtf["edges"])
    assert fields[0] < 0.05 and fields[-1] > 0.4  # centre and through the field


def test_every_planted_bad_pixel_is_found_where_the_truth_put_it(iq_run: Path) -> None:
    found = _json(iq_run / "results" / "badpixels.json")
    planted = CameraRenderer(TRUTH).bad_pixels.as_dict()  # from the truth file's own seed
    width = TRUTH.geometry.width
    for kind, flat in planted.items():
        expected = sorted([int(i % width), int(i // width)] for i in flat)
        assert sorted(found["positions_xy"][kind]) == expected, kind
    total = sum(len(v) for v in planted.values())
    assert found["bad_pixels"] == total
    assert found["operability_percent"] == pytest.approx(100.0 * (1 - total / (640 * 512)))


def test_random_noise_component_is_the_cameras_temporal_noise(iq_run: Path) -> None:
    noise = _json(iq_run / "results" / "noise3d.json")
    # The renderer's temporal noise is white per pixel and frame: all of it lands in the random
    # component tvh (D'Agostino & Webb 1991), plus the ADC's rounding q^2/12 (q = 1 count,
    # Sheppard's correction; common practice). Bad pixels replaced by the mean of 8 neighbours
    # carry noise / sqrt(8): that lowers tvh by at most sigma x (replaced / pixels) x 7/16.
    expected = math.sqrt(TRUTH.temporal_noise_counts ** 2 + 1.0 / 12.0)
    pixels = noise["rows"] * noise["cols"]
    bias = expected * noise["conditions"]["bad_pixels_replaced"] / pixels * 7.0 / 16.0
    tvh, u = noise["sigma_counts"]["tvh"], noise["sigma_uncertainty_counts"]["tvh"]
    assert abs(tvh - expected) <= 3.0 * u + bias
    # in mK through the SiTF at 30 C: the truth's 50 mK, within 0.5 % (the ADC rounding adds
    # 0.09 %, the SiTF's statistical uncertainty is below 0.05 %)
    assert noise["sigma_mk"]["tvh"] == pytest.approx(1000.0 * TRUTH.netd_k, rel=0.005)


def test_gain_nonuniformity_is_the_cameras_gain_pattern(iq_run: Path) -> None:
    u = _json(iq_run / "results" / "uniformity.json")
    # The renderer draws each pixel's gain as 1 + gain_fpn_rel N(0, 1); the std of N pixels is
    # uncertain by 1/sqrt(2 (N - 1)) relative (normal sample; common practice): 3 of those.
    truth = 100.0 * TRUTH.gain_fpn_rel
    rel = 1.0 / math.sqrt(2.0 * (u["pixels_used"] - 1))
    assert abs(u["gain_nonuniformity_percent"] - truth) <= 3.0 * rel * truth
    assert u["conditions"]["bad_pixels_excluded"] > 0
    # Offset: the renderer's offset map over the same good pixels. Within 1 %: 3 x 0.12 % for
    # the sample std, plus the removal of the temporal noise left in the 16-frame means (a fifth
    # of the level's variance here, itself known to about 0.1 %).
    bad = tifffile.imread(iq_run / "results" / "bad_pixels.tif") != 0
    offset = float(CameraRenderer(TRUTH).offset_map[~bad].std(ddof=1))
    assert u["offset_nonuniformity_counts"] == pytest.approx(offset, rel=0.01)


@pytest.mark.parametrize("name, files", [
    ("netd", ["netd.json"]), ("mtf", ["mtf.json"]), ("noise3d", ["noise3d.json"]),
    ("badpixels", ["badpixels.json"]), ("uniformity", ["uniformity.json"]),
    ("sitf", ["sitf.json"]),
])
def test_reanalysis_reproduces_the_run(iq_run: Path, name: str, files: list[str]) -> None:
    with contextlib.redirect_stdout(io.StringIO()):
        assert main(["analyze", name, str(iq_run)]) in (0, 1)
    again = sorted((iq_run / "reanalysis").iterdir(), key=lambda p: int(p.name))[-1]
    for f in files:
        _numbers(_json(iq_run / "results" / f), _json(again / "results" / f), f)


def test_plots_and_report_load_no_plotting_library(iq_run: Path) -> None:
    # A fresh process re-runs every image-quality analysis (plots included) and writes the
    # report: no plotting or imaging library may be loaded (matplotlib's import alone costs
    # about a second, the plots are SVG written by analysis.svg_plot).
    import subprocess
    import sys

    code = ("import contextlib, io, sys\n"
            "from station.cli.main import main\n"
            "with contextlib.redirect_stdout(io.StringIO()):\n"
            f"    rc = [main(['analyze', n, {str(iq_run)!r}]) for n in "
            "('netd', 'mtf', 'noise3d', 'badpixels')]\n"
            f"    rc.append(main(['report', {str(iq_run)!r}]))\n"
            "print(rc, sorted({m.split('.')[0] for m in sys.modules} & {'matplotlib', 'PIL'}))\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          cwd=Path(__file__).resolve().parents[2], timeout=300)
    assert done.returncode == 0, done.stderr
    rc, loaded = done.stdout.strip().splitlines()[-1].rsplit("] ", 1)
    assert loaded == "[]" and all(int(c) in (0, 1) for c in rc.strip("[").split(", "))
    again = sorted((iq_run / "reanalysis").iterdir(), key=lambda p: int(p.name))[-1]
    assert (again / "plots" / "badpixels.svg").is_file()


def test_frame_captured_elsewhere_gives_the_runs_mtf(iq_run: Path, tmp_path: Path) -> None:
    out = tmp_path / "out"
    with contextlib.redirect_stdout(io.StringIO()):
        code = main(["analyze", "mtf", "--frame", str(iq_run / "frames" / "edge_centre.avg.tif"),
                     "--geometry", str(BUILTIN_DIR / "example_edge_geometry.yaml"),
                     "--out", str(out)])
    assert code == 0
    run_edge = next(e for e in _json(iq_run / "results" / "mtf.json")["edges"]
                    if e["capture"] == "edge_centre")
    (alone,) = _json(out / "mtf.json")["edges"]
    assert alone["mtf_at_nyquist"] == pytest.approx(run_edge["mtf_at_nyquist"], abs=SAME)
    assert np.allclose(alone["mtf"], run_edge["mtf"], atol=SAME)
    assert (out / "plots" / "mtf.svg").is_file()


@pytest.mark.parametrize("analysis, shape, words", [
    ("mtf", (512, 640), "no straight edge"),             # a flat frame has no edge
    ("noise3d", (512, 640), "needs a stack of 2 or more frames"),
    ("noise3d", (4, 100, 100), "geometry file says 512 x 640"),
])
def test_frames_from_elsewhere_that_do_not_fit_are_refused_clearly(
        tmp_path: Path, capsys: pytest.CaptureFixture[str], analysis: str,
        shape: tuple[int, ...], words: str) -> None:
    frame = tmp_path / "frame.tif"
    rng = np.random.default_rng(0)
    tifffile.imwrite(frame, (1000 + rng.normal(0, 5, shape)).astype(np.uint16),
                     photometric="minisblack")
    geometry = tmp_path / "g.yaml"
    text = (BUILTIN_DIR / "example_edge_geometry.yaml").read_text(encoding="utf-8")
    if analysis != "mtf":
        text = text.replace("kind: slanted_edge", "kind: open_aperture").replace(
            "  angle_deg: 5.0", "")
    geometry.write_text(text, encoding="utf-8")
    code = main(["analyze", analysis, "--frame", str(frame), "--geometry", str(geometry),
                 "--out", str(tmp_path / "out")])
    out = " ".join(capsys.readouterr().out.split())
    assert code == 2 and str(frame) in out and words in out  # exitcodes.INVALID, file named
    assert "Traceback" not in out
