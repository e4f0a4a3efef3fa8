"""Physics checks of the simulated camera's image formation (simulators/camera_render.py)."""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np
import pytest
import yaml
from photutils.centroids import centroid_com

from analysis.geometry import BrownConrady, CameraGeometry
from analysis.radiometry import band_radiance
from analysis.targets import OpenAperture, PinholeGrid, SinglePinhole, SlantedEdge
from simulators.camera_render import CameraRenderer, SceneState, pixel_integrated_edge
from simulators.camera_truth import CameraTruth, truth_from_mapping

DEMO = Path(__file__).resolve().parents[2] / "station" / "data" / "demo_camera_truth.yaml"
SMALL = CameraGeometry(width=96, height=80, pixel_pitch_um=17.0, focal_length_mm=25.0)


def _truth(**kw: object) -> CameraTruth:
    base = dict(geometry=SMALL, gain_fpn_rel=0.0, offset_fpn_counts=0.0)
    base.update(kw)
    return CameraTruth(**base)


@pytest.mark.parametrize("blur", [0.5, 0.8])
def test_noise_free_centroid_is_unbiased_over_subpixel_phases(blur: float) -> None:
    # Reference: photutils centroid_com (intensity-weighted centroid, returns (x, y)) on the
    # background-subtracted noise-free spot must equal the projected truth within 0.02 px
    # (issue requirement) over a 5 x 5 sweep of sub-pixel phases.
    worst = 0.0
    for fx in np.linspace(0.0, 0.8, 5):
        for fy in np.linspace(0.0, 0.8, 5):
            geom = SMALL.replace(cx=47.0 + fx, cy=39.0 + fy, distortion=BrownConrady(k1=-0.2))
            r = CameraRenderer(_truth(geometry=geom, blur_sigma_px=blur))
            scene = SceneState(source_c=60.0, plate_c=20.0, target=SinglePinhole(0.3, 3.0, -2.0))
            img = r.render_clean(scene)
            (x, y), = r.expected_spots(scene)[0]
            bg = img[0, 0]
            c, rr = int(round(x)), int(round(y))
            cut = img[rr - 8:rr + 9, c - 8:c + 9] - bg
            cx, cy = centroid_com(cut)
            worst = max(worst, abs(cx + c - 8 - x), abs(cy + rr - 8 - y))
    assert worst < 0.02


def test_pinhole_flux_equals_solid_angle_ratio() -> None:
    # Radiometry of an unresolved source (e.g. Wolfe, Introduction to Radiometry): a pinhole of
    # diameter d at the focus of a collimator F subtends pi (d/2)^2 / F^2 sr; a pixel sees
    # 1/(fx fy) sr; summed signal = R dL * ratio.
    r = CameraRenderer(_truth())
    scene = SceneState(source_c=50.0, plate_c=20.0, target=SinglePinhole(0.5),
                       collimator_focal_mm=800.0)
    img = r.render_clean(scene)
    l_src = band_radiance(273.15 + 50.0, (8.0, 12.0))
    l_plate = band_radiance(273.15 + 20.0, (8.0, 12.0))
    expected = 200.0 * (l_src - l_plate) * math.pi * 0.25 ** 2 * SMALL.fx * SMALL.fy / 800.0 ** 2
    assert (img - img[0, 0]).sum() == pytest.approx(expected, rel=1e-9)
    # Background: offset + R * L(plate) (signal model of CameraTruth).
    assert img[0, 0] == pytest.approx(2000.0 + 200.0 * l_plate, rel=1e-12)


def test_temporal_noise_gives_back_the_configured_netd() -> None:
    # NETD = sigma_t / SiTF (Opt. Eng. 29(7), 1990: average variances, not sigmas). Variance of a
    # Gaussian sample of N frames has relative std sqrt(2/(N-1)) (chi-square); averaged over M
    # independent pixels it shrinks by sqrt(M). Rounding to integer counts adds 1/12 count^2
    # (Sheppard's correction), removed before comparing. Tolerance: 4 standard errors.
    truth = _truth(netd_k=0.050, netd_reference_c=30.0, offset_fpn_counts=25.0, gain_fpn_rel=0.0)
    r = CameraRenderer(truth)
    scene = SceneState(source_c=30.0, plate_c=20.0, target=OpenAperture())
    n = 40
    stack = np.stack([r.render(scene, i) for i in range(n)]).astype(float)
    var = stack.var(axis=0, ddof=1).mean() - 1.0 / 12.0
    m = stack.shape[1] * stack.shape[2]
    rel_var_err = math.sqrt(2.0 / (n - 1)) / math.sqrt(m)
    # SiTF measured from the clean image at +/- 0.5 K around the reference (central difference).
    up = r.render_clean(SceneState(30.5, 20.0, OpenAperture())).mean()
    down = r.render_clean(SceneState(29.5, 20.0, OpenAperture())).mean()
    sitf = up - down
    netd = math.sqrt(var) / sitf
    assert netd == pytest.approx(0.050, rel=4 * 0.5 * rel_var_err + 1e-4)


def test_same_seed_same_frames_and_frames_differ() -> None:
    truth = dataclasses.replace(truth_from_mapping(yaml.safe_load(DEMO.read_text())),
                                geometry=SMALL)
    scene = SceneState(35.0, 20.0, PinholeGrid(3, 3, 20.0, 0.5))
    a, b = CameraRenderer(truth), CameraRenderer(truth)
    np.testing.assert_array_equal(a.render(scene, 7), b.render(scene, 7))
    assert np.any(a.render(scene, 7) != a.render(scene, 8))
    c = CameraRenderer(truth, seed=truth.seed + 1)
    assert np.any(c.render(scene, 7) != a.render(scene, 7))


def test_adc_clips_at_full_scale_and_zero() -> None:
    # A 12-bit ADC saturates at 2^12 - 1 = 4095 and cannot go below 0.
    hot = CameraRenderer(_truth(bit_depth=12, offset_counts=1000.0))
    frame = hot.render(SceneState(300.0, 20.0, OpenAperture()), 0)
    assert frame.dtype == np.uint16 and frame.max() == 4095 and frame.min() == 4095
    cold = CameraRenderer(_truth(bit_depth=12, offset_counts=-20000.0))
    assert cold.render(SceneState(20.0, 20.0, OpenAperture()), 0).max() == 0


def test_dead_and_hot_pixel_counts_match_fractions() -> None:
    # Counts are round(fraction * pixels) by construction of the defect map; a dead pixel reads 0
    # and a hot one full scale whatever the scene.
    g = SMALL.replace(width=320, height=256)
    truth = _truth(geometry=g, dead_fraction=0.001, hot_fraction=0.0005, noisy_fraction=0.001)
    r = CameraRenderer(truth)
    frame = r.render(SceneState(30.0, 20.0, OpenAperture()), 3)
    npix = 320 * 256
    assert int((frame == 0).sum()) == round(0.001 * npix)
    assert int((frame == 2 ** 14 - 1).sum()) == round(0.0005 * npix)
    assert len(r.bad_pixels.noisy) == round(0.001 * npix)
    json.dumps(r.truth_for_scene(SceneState(30.0, 20.0, OpenAperture())))


@pytest.mark.parametrize("angle", [5.0, -8.0, 0.0])
def test_edge_pixel_integration_matches_supersampling(angle: float) -> None:
    # Reference: brute-force numerical integration (101 x 101 midpoint samples per pixel) of the
    # Gaussian-blurred step Phi(n.p / sigma); midpoint rule error O(h^2) ~ 1e-5 here.
    from scipy.special import ndtr
    a = math.radians(angle)
    n = (math.cos(a), -math.sin(a))
    sigma = 0.6
    exact = pixel_integrated_edge(12, 10, (5.3, 4.6), n, sigma)
    sub = (np.arange(101) + 0.5) / 101 - 0.5
    for row in range(10):
        for col in range(3, 9):
            xs = col + sub[None, :]
            ys = row + sub[:, None]
            ref = ndtr((n[0] * (xs - 5.3) + n[1] * (ys - 4.6)) / sigma).mean()
            assert exact[row, col] == pytest.approx(ref, abs=3e-5)


def test_slanted_edge_through_renderer_is_inverted_and_tilted() -> None:
    # Collimator relay inverts (geometry docstring): the open side x > 0 of the plate appears on
    # the small-x side of the image; far from the edge the levels approach the plate and source
    # levels. The diffraction edge's tail falls as 1/d (the circular aperture's MTF has a linear
    # cusp 1 - (4/pi) lambda N f at f = 0, Goodman 6.3.2, whose transform falls as 1/x^2):
    # within 0.05 / d of the contrast at d pixels from the edge.
    r = CameraRenderer(_truth())
    scene = SceneState(40.0, 20.0, SlantedEdge(5.0))
    img = r.render_clean(scene)
    l_src = band_radiance(313.15, (8.0, 12.0))
    l_plate = band_radiance(293.15, (8.0, 12.0))
    src, plate = 2000.0 + 200.0 * l_src, 2000.0 + 200.0 * l_plate
    assert 0 < src - img[40, 2] < (src - plate) * 0.05 / 40.0
    assert 0 < img[40, 93] - plate < (src - plate) * 0.05 / 40.0
    # Edge tilt: 50 % crossing moves by tan(5 deg) px per row (undistorted camera).
    half = 2000.0 + 100.0 * (l_src + l_plate)
    def crossing(row: int) -> float:
        prof = img[row]
        i = int(np.argmax(prof < half))
        return i - 1 + (prof[i - 1] - half) / (prof[i - 1] - prof[i])
    slope = (crossing(70) - crossing(10)) / 60.0
    assert abs(slope) == pytest.approx(math.tan(math.radians(5.0)), abs=2e-3)
