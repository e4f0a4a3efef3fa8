"""The simulated camera's optics chain, mounting error, seeds and capture-keyed noise."""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np
import pytest
import yaml

from analysis.geometry import CameraGeometry, project_target
from analysis.optics import (SystemMtf, diffraction_mtf_mono, gaussian_mtf, pixel_aperture_mtf)
from analysis.targets import OpenAperture, PinholeGrid, SlantedEdge
from drivers.clock import SimClock
from simulators.camera_grabber import SimFrameGrabber
from simulators.camera_render import (CameraRenderer, SceneState, boresight_pixel,
                                      edge_spread_table, pixel_integrated_edge, psf_edge)
from simulators.camera_truth import CameraTruth, MountingError, truth_from_mapping

DEMO = Path(__file__).resolve().parents[2] / "station" / "data" / "demo_camera_truth.yaml"
SMALL = CameraGeometry(width=64, height=48, pixel_pitch_um=17.0, focal_length_mm=25.0)


def _demo() -> CameraTruth:
    return truth_from_mapping(yaml.safe_load(DEMO.read_text()))


def test_diffraction_mtf_matches_pupil_autocorrelation() -> None:
    # Goodman, Introduction to Fourier Optics (3rd ed., 6.3.2): the incoherent OTF is the
    # normalised autocorrelation of the pupil; for a circle it is (2/pi)(acos v - v sqrt(1-v^2)).
    # Independent check: autocorrelate a sampled disc by FFT (radius 200 samples: area error of
    # the staircase about 1/R, so agreement to 0.01).
    n, radius = 1024, 200.0
    y, x = np.mgrid[:n, :n] - n / 2
    pupil = (x * x + y * y <= radius * radius).astype(float)
    f = np.fft.fft2(pupil)
    auto = np.real(np.fft.ifft2(f * np.conj(f)))
    auto /= auto[0, 0]
    for v in (0.1, 0.25, 0.5, 0.75, 0.9):
        shift = int(round(v * 2 * radius))
        nu = shift / (2 * radius)
        # nu = f lambda N: choose f (cycles/mm) for lambda = 10 um, N = 2
        f_mm = nu / (10e-3 * 2.0)
        assert float(diffraction_mtf_mono(f_mm, 10.0, 2.0)) == pytest.approx(
            auto[0, shift], abs=0.01)
    assert float(diffraction_mtf_mono(1.0 / (10e-3 * 2.0), 10.0, 2.0)) == 0.0  # cut-off


def test_textbook_values_of_the_mtf_terms() -> None:
    # Square pixel, full fill: |sinc(f)|, 2/pi = 0.6366 at Nyquist (Boreman, Modulation Transfer
    # Function in Optical and Electro-Optical Systems, SPIE 2001, ch. 2).
    assert float(pixel_aperture_mtf(0.5)) == pytest.approx(2 / math.pi, abs=1e-12)
    # Gaussian spot sigma s: exp(-2 pi^2 s^2 f^2) (Fourier transform of a Gaussian).
    assert float(gaussian_mtf(0.5, 0.5)) == pytest.approx(math.exp(-math.pi ** 2 / 8), rel=1e-12)
    # Cascade: product of the terms (linear systems; Boreman ch. 1).
    m = SystemMtf(f_number=1.0, band_um=(8.0, 12.0), pixel_pitch_um=17.0, blur_sigma_px=0.4)
    assert float(m(0.3, 30.0)) == pytest.approx(
        float(m.optics(0.3)) * float(np.sinc(0.3 * math.cos(math.pi / 6))
                                     * np.sinc(0.3 * math.sin(math.pi / 6))), rel=1e-12)


def test_fourier_edge_equals_closed_form_gaussian_edge() -> None:
    # With Gaussian optics only, the Fourier-tabulated pixel-integrated edge must equal the
    # closed-form double integral of the normal CDF over the pixel square (pixel_integrated_edge,
    # itself checked against brute-force supersampling in test_camera_render).
    sigma = 0.6
    for angle in (3.0, -7.0):
        a = math.radians(angle)
        normal = (math.cos(a), -math.sin(a))
        table = edge_spread_table(lambda f: gaussian_mtf(f, sigma), normal, 3.0, reach_px=12.0)
        got = psf_edge(40, 30, (20.3, 14.6), normal, table)
        ref = pixel_integrated_edge(40, 30, (20.3, 14.6), normal, sigma)
        assert np.max(np.abs(got - ref)) < 2e-4


def test_spot_sigma_is_consistent_with_the_psf() -> None:
    # The pinhole spot's Gaussian sigma is the diffraction spot's Gaussian equivalent (0.42 lambda
    # N: Zhang, Zerubia & Olivo-Marin, Appl. Opt. 46(10):1819, 2007) and the aberration blur of
    # the MTF chain added in quadrature: blur^2 = s_diff^2 + s_ab^2.
    t = _demo()
    lam_rms = math.sqrt((12.0 ** 3 - 8.0 ** 3) / (3 * 4.0))   # flat weight over 8-12 um
    assert t.diffraction_sigma_px == pytest.approx(0.42 * 1.0 * lam_rms / 17.0, rel=1e-6)
    assert t.diffraction_sigma_px ** 2 + t.aberration_sigma_px ** 2 == pytest.approx(
        t.blur_sigma_px ** 2, rel=1e-12)
    assert t.system_mtf.blur_sigma_px == t.aberration_sigma_px
    with pytest.raises(ValueError, match="below the diffraction"):
        dataclasses.replace(t, f_number=4.0)


def test_zero_mounting_error_keeps_the_old_projection() -> None:
    # The demo truth states its mounting error explicitly as zero: spots land exactly where the
    # gimbal-only model puts them (earlier results stay reproducible).
    t = _demo()
    assert t.mounting == MountingError(0.0, 0.0, 0.0)
    r = CameraRenderer(t)
    grid = PinholeGrid(3, 3, 27.0, 0.5)
    scene = SceneState(35.0, 20.0, grid, az_deg=1.0, el_deg=-0.5)
    ref = project_target(t.geometry, grid.points_mm(), 1000.0, 1.0, -0.5)
    np.testing.assert_array_equal(r.expected_spots(scene)[0], ref)


def test_mounting_tilt_acts_like_the_gimbal_and_roll_turns_the_image() -> None:
    # A line of sight tilted by (az, el) from the mount's zero sees what the gimbal would show at
    # (az, el) (same conventions, analysis.geometry): positions equal to 1e-9 px on axis.
    base = _demo()
    t = dataclasses.replace(base, mounting=MountingError(az_mrad=3.0, el_mrad=-2.0))
    got = boresight_pixel(t)
    ref = boresight_pixel(base, math.degrees(3e-3), math.degrees(-2e-3))
    np.testing.assert_allclose(got, ref, atol=1e-9)
    # Roll about the line of sight turns the scene by -roll in the image: a pinhole pair 27 mm
    # apart on the plate's x axis changes direction by -roll (distortion-free camera).
    geom = dataclasses.replace(base.geometry, distortion=type(base.geometry.distortion)(),
                               defects=(), roll_deg=0.0, skew_deg=0.0, aspect=1.0)
    plain = dataclasses.replace(base, geometry=geom)
    rolled = dataclasses.replace(plain, mounting=MountingError(roll_mrad=5.0))
    pts = PinholeGrid(1, 2, 27.0, 0.5)
    a = CameraRenderer(plain).expected_spots(SceneState(30, 20, pts))[0]
    b = CameraRenderer(rolled).expected_spots(SceneState(30, 20, pts))[0]
    ang = [math.atan2(*(p[1] - p[0])[::-1]) for p in (a, b)]
    assert ang[1] - ang[0] == pytest.approx(-5e-3, abs=1e-9)


def test_bad_pixels_follow_the_truth_seed_not_the_run_seed() -> None:
    # Issue 13: the truth file's seed places the bad pixels; the run's seed only the noise.
    t = dataclasses.replace(_demo(), geometry=SMALL.replace(width=320, height=256))
    a, b = CameraRenderer(t, seed=1), CameraRenderer(t, seed=99)
    for k, v in a.bad_pixels.as_dict().items():
        np.testing.assert_array_equal(v, b.bad_pixels.as_dict()[k])
    np.testing.assert_array_equal(a.gain_map, b.gain_map)
    c = CameraRenderer(dataclasses.replace(t, seed=t.seed + 1), seed=1)
    assert not np.array_equal(a.bad_pixels.dead, c.bad_pixels.dead)
    scene = SceneState(30.0, 20.0, OpenAperture())
    assert np.any(a.render(scene, 3) != b.render(scene, 3))


def test_unresponsive_pixels_have_their_gain_cut() -> None:
    # Signal model: gain x unresponsive_gain, offset unchanged (camera_truth docstring).
    t = CameraTruth(geometry=SMALL, gain_fpn_rel=0.0, offset_fpn_counts=0.0,
                    unresponsive_fraction=0.01, unresponsive_gain=0.2)
    r = CameraRenderer(t)
    idx = r.bad_pixels.unresponsive
    assert len(idx) == round(0.01 * 64 * 48)
    lo = r.render_mean(SceneState(20.0, 20.0, OpenAperture())).reshape(-1)
    hi = r.render_mean(SceneState(40.0, 20.0, OpenAperture())).reshape(-1)
    good = np.setdiff1d(np.arange(lo.size), idx)
    assert np.allclose((hi - lo)[idx] / (hi - lo)[good].mean(), 0.2, rtol=1e-5)


def test_capture_key_makes_frames_independent_of_history() -> None:
    # Issue 14 item 2: frames seeded by (run seed, capture key, index in the capture) are the
    # same whatever was grabbed before, in any grabber built from the same truth and run seed.
    t = CameraTruth(geometry=SMALL)
    scene = SceneState(30.0, 20.0, OpenAperture())
    g1 = SimFrameGrabber(CameraRenderer(t, seed=5), lambda: scene, SimClock(), 30.0)
    g2 = SimFrameGrabber(CameraRenderer(t, seed=5), lambda: scene, SimClock(), 30.0)
    list(g1.grab(7))                                  # a different history
    g1.begin_capture("step-3/flat")
    g2.begin_capture("step-3/flat")
    a = [f.data for f in g1.grab(3)]
    b = [f.data for f in g2.grab(3)]
    for x, y in zip(a, b):
        np.testing.assert_array_equal(x, y)
    assert np.any(a[0] != a[1])
    g2.begin_capture("step-4/flat")
    assert np.any(next(iter(g2.grab(1))).data != a[0])
    g2.end_capture()
    assert next(iter(g2.grab(1))).counter == 5       # counters go on regardless


def test_dropped_and_short_frames_do_not_shift_a_capture() -> None:
    # The station grabs again after a dropped or a short frame; the frames it keeps are the
    # same as in a capture without faults (only whole frames use up an index).
    from simulators.faults import FaultPlan

    t = CameraTruth(geometry=SMALL)
    scene = SceneState(30.0, 20.0, OpenAperture())
    clean = SimFrameGrabber(CameraRenderer(t, seed=2), lambda: scene, SimClock(), 30.0)
    clean.begin_capture("flat")
    ref = [f.data for f in clean.grab(4)]
    plan = FaultPlan(seed=1)
    plan.add("grabber", "drop", at_command=2)
    plan.add("grabber", "short", at_command=4)
    faulty = SimFrameGrabber(CameraRenderer(t, seed=2), lambda: scene, SimClock(), 30.0,
                             faults=plan)
    faulty.begin_capture("flat")
    kept = [f.data for f in faulty.grab(6) if f.data.shape == (48, 64)]
    assert len(kept) == 4
    for a, b in zip(kept, ref):
        np.testing.assert_array_equal(a, b)


def test_without_a_capture_key_frames_follow_the_counter() -> None:
    # Default behaviour kept: frame n of the grabber is the renderer's frame n (counter seed).
    t = CameraTruth(geometry=SMALL)
    scene = SceneState(30.0, 20.0, OpenAperture())
    g = SimFrameGrabber(CameraRenderer(t, seed=5), lambda: scene, SimClock(), 30.0)
    frames = list(g.grab(3))
    ref = CameraRenderer(t, seed=5)
    for f in frames:
        np.testing.assert_array_equal(f.data, ref.render(scene, f.counter))
        assert "capture_key" not in f.meta


def test_mounting_in_the_truth_file_is_checked() -> None:
    d = yaml.safe_load(DEMO.read_text())
    d["mounting"] = {"az_mrad": 2.5, "el_mrad": -1.0, "roll_mrad": 4.0}
    assert truth_from_mapping(d).mounting == MountingError(2.5, -1.0, 4.0)
    d["mounting"] = {"az_mrad": "left", "tilt": 1}
    with pytest.raises(ValueError) as err:
        truth_from_mapping(d)
    assert "mounting.az_mrad: expected a number" in str(err.value)
    assert "mounting.tilt: unknown key" in str(err.value)


def test_table_noise_has_the_configured_variance() -> None:
    # Inverse-CDF sampling: variance sigma_t^2 (+1/12 count^2 for rounding, Sheppard) within
    # 4 standard errors of a sample variance over 64 x 48 x 20 values (chi-square).
    t = CameraTruth(geometry=SMALL, gain_fpn_rel=0.0, offset_fpn_counts=0.0)
    r = CameraRenderer(t)
    scene = SceneState(30.0, 20.0, OpenAperture())
    stack = np.stack([r.render(scene, i) for i in range(20)]).astype(float)
    var = stack.var(axis=0, ddof=1).mean() - 1.0 / 12.0
    rel = math.sqrt(2.0 / (19 * 64 * 48))
    assert var == pytest.approx(t.temporal_noise_counts ** 2, rel=4 * rel)
    frame = r.render(SceneState(30.0, 20.0, SlantedEdge(5.0)), 0)
    assert frame.dtype == np.uint16 and frame.shape == (48, 64)
