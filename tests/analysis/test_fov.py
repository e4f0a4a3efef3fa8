"""Field of view and IFOV (analysis.fov, analysis.fov_scan) against the standard lens formulas.

Outside reference: W. J. Smith, *Modern Optical Engineering* (field of view of an imaging
system): rectilinear ``2 atan(N p / 2 f)``; equidistant (f-theta) ``N p / f`` rad (panotools
"General lens model" for the projection); IFOV ``p / f``.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from analysis.alignment import aligned_pose
from analysis.boresight import find_pinhole
from analysis.centroid import centroid_at
from analysis.fov import fov_from_model, fov_verdicts, ifov_from_slope
from analysis.fov_scan import scan_fov, spot_flux_near
from analysis.geometry import BrownConrady, CameraGeometry
from analysis.targets import SinglePinhole
from simulators.camera_render import CameraRenderer
from tests.analysis.geometry_sim import frame, renderer_for, spot_at, truth_camera


def rectilinear_fov(n: int, pitch_um: float, f_mm: float) -> float:
    return math.degrees(2 * math.atan(n * pitch_um / 1000 / (2 * f_mm)))   # Smith


def f_theta_fov(n: int, pitch_um: float, f_mm: float) -> float:
    return math.degrees(n * pitch_um / 1000 / f_mm)                        # Smith / panotools


def test_model_fov_of_a_rectilinear_camera_is_2_atan_np_over_2f() -> None:
    g = CameraGeometry(640, 512, 17.0, 25.0)
    fov = fov_from_model(g, focal_sigma_mm=0.05)
    assert fov.h_deg == pytest.approx(rectilinear_fov(640, 17.0, 25.0), abs=1e-9)   # 24.55 deg
    assert fov.v_deg == pytest.approx(rectilinear_fov(512, 17.0, 25.0), abs=1e-9)
    assert fov.d_deg == pytest.approx(rectilinear_fov(math.hypot(640, 512), 17.0, 25.0), abs=1e-9)
    assert fov.ifov_mrad == pytest.approx(17.0 / 25.0, rel=1e-12)   # IFOV = p / f
    # sigma from d/df [2 atan(N p / 2 f)] = -(N p / f^2) / (1 + (N p / 2 f)^2), times sigma_f.
    x = 640 * 0.017
    dfov = math.degrees(x / 25.0 ** 2 / (1 + (x / 50.0) ** 2))
    assert fov.sigma_h_deg == pytest.approx(dfov * 0.05, rel=2e-3)


def test_model_fov_of_an_f_theta_camera_is_np_over_f() -> None:
    g = CameraGeometry(640, 512, 17.0, 4.0, projection="equidistant")
    fov = fov_from_model(g)
    assert fov.h_deg == pytest.approx(f_theta_fov(640, 17.0, 4.0), abs=1e-9)   # 155.8 deg
    assert fov.v_deg == pytest.approx(f_theta_fov(512, 17.0, 4.0), abs=1e-9)
    assert fov.d_deg == pytest.approx(f_theta_fov(math.hypot(640, 512), 17.0, 4.0), abs=1e-9)


def run_scan(geom: CameraGeometry, nominal: CameraGeometry, pinhole_mm: float, seed: int = 3):
    r = renderer_for(geom, seed)
    count = iter(range(100_000))
    centre = spot_at(geom, 0.0, 0.0)
    hole = SinglePinhole(diameter_mm=pinhole_mm)
    ref_img = frame(r, 0.0, 0.0, source_c=90.0, target=hole)
    ref_flux, ref_sigma = spot_flux_near(ref_img, *centre)
    seen = find_pinhole(ref_img)

    def pose_of(px):   # where the model expects the spot at pixel px (the corner searches)
        return aligned_pose((seen.x, seen.y), px, (0.0, 0.0), nominal)

    def fraction(pose):
        img = frame(r, pose[0], pose[1], source_c=90.0, target=hole, index=next(count))
        guess = spot_at(nominal, *pose)          # where the model expects it; searched around
        f, s = spot_flux_near(img, float(np.clip(guess[0], 0, geom.width - 1)),
                              float(np.clip(guess[1], 0, geom.height - 1)))
        return f / ref_flux, s / ref_flux
    return scan_fov(fraction, (0.0, 0.0), nominal, tolerance_deg=0.01,
                    reference_rel_sigma=ref_sigma / ref_flux, pose_of=pose_of)


@pytest.mark.parametrize("projection, f_mm, pinhole_mm, formula", [
    ("rectilinear", 6.0, 3.0, rectilinear_fov), ("equidistant", 2.0, 8.0, f_theta_fov)])
def test_scan_mode_fov_matches_the_lens_formula_within_its_uncertainty(projection, f_mm,
                                                                        pinhole_mm,
                                                                        formula) -> None:
    # Small detector (64 x 48) for speed, a pinhole large enough for a bright spot on these short
    # lenses (its image stays about a pixel across); the nominal model is 1 % off in focal length,
    # which only changes where the search starts, not where the edge is found.
    geom = CameraGeometry(64, 48, 17.0, f_mm, projection=projection)
    runs = [run_scan(geom, geom.replace(focal_length_mm=f_mm * 1.01), pinhole_mm, seed=s)
            for s in (1, 2, 3)]
    # Three noise seeds: the mean against the formula within k = 2 of its own sigma (GUM), the
    # stated sigma of one run tight (< 1 % of the field). Offset FPN dominates the noise here.
    for axis, n in (("h", 64), ("v", 48), ("d", math.hypot(64, 48))):
        values = np.array([r.fov.value(axis) for r in runs])
        mean, sigma_mean = values[:, 0].mean(), math.sqrt((values[:, 1] ** 2).mean() / 3)
        want = formula(n, 17.0, f_mm)
        assert abs(mean - want) < 2 * sigma_mean + 1e-4, (axis, mean, want, sigma_mean)
        assert values[:, 1].max() < 0.01 * want
    assert all(len(e.probes) < 20 for r in runs for e in r.edges.values())   # bounded bisection


def test_ifov_from_the_slope_of_centroid_against_stage_angle() -> None:
    # Demo-like camera with barrel distortion: the cubic term takes the curvature, the slope at
    # the centre stays fx. IFOV = p / f (Smith) = 17 / 12.55 mrad.
    geom = CameraGeometry(160, 128, 17.0, 12.55, distortion=BrownConrady(k1=-0.25))
    r = CameraRenderer(truth_camera(geom), seed=4)
    angles = np.linspace(-2.0, 2.0, 9)
    xs, sig = [], []
    for i, a in enumerate(angles):
        guess = spot_at(geom, a, 0.0)
        s = centroid_at(frame(r, a, 0.0, source_c=60.0, index=i), *guess, method="gauss",
                        repair_bad_pixels=False)
        xs.append(s.x)
        sig.append(s.sigma_x)
    ifov, sigma = ifov_from_slope(angles, xs, sig)
    assert abs(ifov - 17.0 / 12.55) < 3 * sigma
    assert sigma < 0.002 * ifov


def test_fov_verdicts_use_min_and_max_limits() -> None:
    fov = fov_from_model(CameraGeometry(640, 512, 17.0, 25.0), focal_sigma_mm=0.05)
    v = {x.key: x.status for x in fov_verdicts({"min_fov_h_deg": 24.0, "max_fov_h_deg": 24.6,
                                                "max_fov_v_deg": 19.0}, fov)}
    assert v == {"min_fov_h_deg": "PASS", "max_fov_h_deg": "MARGINAL", "max_fov_v_deg": "FAIL"}
