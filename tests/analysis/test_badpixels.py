"""Bad-pixel map and operability (analysis/badpixels.py) against the simulated camera's truth.

The simulated camera plants dead (read 0), hot (full scale), noisy (noise x 6) and
non-responsive (gain x 0.2) pixels at positions drawn from its truth file's own seed
(simulators/camera_render.py). Every planted pixel must be found in its class, at the truth's
positions, with no false ones. Operability = 100 (1 - bad / all) (definition).
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import numpy as np
import pytest
import yaml

from analysis.badpixels import bad_pixel_map, read_mask_tiff, write_mask_tiff
from analysis.targets import OpenAperture
from simulators.camera_render import CameraRenderer, SceneState
from simulators.camera_truth import truth_from_mapping

DEMO = Path(__file__).resolve().parents[2] / "station" / "data" / "demo_camera_truth.yaml"
KINDS = ("dead", "hot", "noisy", "unresponsive")


def _demo():
    return truth_from_mapping(yaml.safe_load(DEMO.read_text()))


def _flats(r: CameraRenderer, frames: int) -> tuple[np.ndarray, np.ndarray]:
    cool = np.stack([r.render(SceneState(25.0, 20.0, OpenAperture()), i, "cool")
                     for i in range(frames)])
    warm = np.stack([r.render(SceneState(35.0, 20.0, OpenAperture()), i, "warm")
                     for i in range(frames)])
    return cool, warm


def test_demo_truth_file_bad_pixels_are_all_found_at_their_positions() -> None:
    # The demo truth file as it is (640 x 512, its own seed 42); the run seed does not matter.
    truth = _demo()
    r = CameraRenderer(truth, seed=11)
    m = bad_pixel_map(*_flats(r, 12), conditions={"cool_c": 25.0, "warm_c": 35.0})
    planted = r.bad_pixels.as_dict()
    for k in KINDS:
        np.testing.assert_array_equal(np.flatnonzero(getattr(m, k).ravel()), planted[k])
        assert len(planted[k]) > 0
    # the same positions a renderer with another run seed plants (truth seed only)
    other = CameraRenderer(truth, seed=12345).bad_pixels.as_dict()
    for k in KINDS:
        np.testing.assert_array_equal(other[k], planted[k])
    n_bad = sum(len(v) for v in planted.values())
    assert m.count == n_bad
    assert m.operability_percent == pytest.approx(100.0 * (1 - n_bad / (640 * 512)), abs=1e-12)
    # demo: 0.05 + 0.02 + 0.05 + 0.02 % planted = 0.14 % against the UUT's 0.5 % limit
    v = {x.key: x for x in m.verdicts({"max_bad_pixel_percent": 0.5,
                                       "min_operability_percent": 99.0})}
    assert v["max_bad_pixel_percent"].status == "PASS"
    assert v["max_bad_pixel_percent"].value == pytest.approx(0.140, abs=0.001)
    assert v["min_operability_percent"].conditions["cool_c"] == 25.0
    json.dumps(m.to_dict())


@pytest.mark.parametrize("seed", range(10))
def test_no_false_and_no_missed_bad_pixels_over_seeds(seed: int) -> None:
    # Ten truth seeds (positions, fixed pattern) and run seeds (noise) at the demo's noise,
    # fixed pattern and bad-pixel fractions, on a 320 x 256 crop of the format to stay fast.
    t = _demo()
    g = dataclasses.replace(t.geometry, width=320, height=256, cx=None, cy=None, defects=())
    truth = dataclasses.replace(t, geometry=g, seed=1000 + seed)
    r = CameraRenderer(truth, seed=seed)
    m = bad_pixel_map(*_flats(r, 12))
    planted = r.bad_pixels.as_dict()
    for k in KINDS:
        np.testing.assert_array_equal(np.flatnonzero(getattr(m, k).ravel()), planted[k], k)


def test_clusters_and_mask_tiff(tmp_path: Path) -> None:
    # A 2 x 2 block of dead pixels, a diagonal pair of hot ones (8-connected: one cluster of 2)
    # and a lone noisy pixel: clusters of sizes 4, 2, 1.
    rng = np.random.default_rng(3)
    cool = 1000.0 + rng.normal(0, 2.0, (10, 60, 80))
    warm = cool + 400.0
    cool[:, 10:12, 20:22] = 0.0
    warm[:, 10:12, 20:22] = 0.0
    for y, x in ((30, 40), (31, 41)):
        cool[:, y, x] = warm[:, y, x] = 16383.0
    warm[:, 50, 70] += rng.normal(0, 20.0, 10)
    cool[:, 50, 70] += rng.normal(0, 20.0, 10)
    m = bad_pixel_map(cool, warm)
    assert sorted(m.cluster_sizes.tolist()) == [1, 2, 4]
    assert m.largest_cluster == 4 and m.cluster_histogram() == {1: 1, 2: 1, 4: 1}
    assert m.positions("noisy").tolist() == [[70, 50]]
    path = write_mask_tiff(tmp_path / "bad_pixels.tif", m)
    np.testing.assert_array_equal(read_mask_tiff(path), m.mask)
    import tifffile
    codes = tifffile.imread(path)
    assert codes[10, 20] == 1 and codes[30, 40] == 2 and codes[50, 70] == 4
    v = m.verdicts({"max_cluster_size": 3})
    assert v[0].status == "FAIL" and v[0].value == 4


def test_shading_is_not_taken_for_bad_pixels() -> None:
    # 20 % vignetting (a smooth fall-off toward the corners) must not flag the corners.
    rng = np.random.default_rng(5)
    yy, xx = np.mgrid[:64, :80]
    shade = 1.0 - 0.2 * (((xx - 40) / 40.0) ** 2 + ((yy - 32) / 32.0) ** 2) / 2
    cool = 1000.0 * shade + rng.normal(0, 2.0, (8, 64, 80))
    warm = cool + 500.0 * shade
    assert bad_pixel_map(cool, warm).count == 0


def test_bad_input_is_refused_plainly() -> None:
    with pytest.raises(ValueError, match="stack"):
        bad_pixel_map(np.zeros((4, 4)), np.zeros((2, 4, 4)))
    with pytest.raises(ValueError, match="not brighter"):
        bad_pixel_map(np.ones((3, 4, 4)), np.ones((3, 4, 4)))
