"""3-D noise (analysis/noise3d.py): D'Agostino & Webb, Proc. SPIE 1488, 1991.

Checks: (1) a cube built from exactly orthogonal components of known RMS gives each back to
rounding (the operators' definition); (2) a cube of independent random components gives back
their standard deviations within the reported statistical uncertainty (balanced random-effects
ANOVA expected mean squares, Montgomery, Design and Analysis of Experiments, ch. 13); (3) the
simulated camera's temporal noise reads its true NETD in mK through the true SiTF.
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np
import pytest
import yaml

from analysis.noise3d import COMPONENTS, noise_3d, replace_bad_pixels
from analysis.targets import OpenAperture
from simulators.camera_render import CameraRenderer, SceneState
from simulators.camera_truth import truth_from_mapping

DEMO = Path(__file__).resolve().parents[2] / "station" / "data" / "demo_camera_truth.yaml"
T, V, H = 20, 40, 48
TRUE = {"t": 0.7, "v": 1.1, "h": 1.6, "tv": 0.9, "th": 0.8, "vh": 2.5, "tvh": 3.0}
AXES = {"t": (0,), "v": (1,), "h": (2,), "tv": (0, 1), "th": (0, 2), "vh": (1, 2),
        "tvh": (0, 1, 2)}


def _centre(a: np.ndarray) -> np.ndarray:
    """Remove the mean along every axis of length > 1: the component becomes orthogonal to the
    mean and to every coarser component (double centring, as the operators imply)."""
    for ax in range(a.ndim):
        if a.shape[ax] > 1:
            a = a - a.mean(axis=ax, keepdims=True)
    return a


def _component(rng: np.random.Generator, name: str, exact: bool) -> np.ndarray:
    shape = [1, 1, 1]
    for ax in AXES[name]:
        shape[ax] = (T, V, H)[ax]
    c = rng.standard_normal(shape)
    if exact:
        c = _centre(c)
        c = c / np.sqrt(np.mean(c * c)) * TRUE[name]
    else:
        c = c * TRUE[name]
    return np.broadcast_to(c, (T, V, H))


def test_exactly_constructed_components_are_given_back() -> None:
    rng = np.random.default_rng(7)
    cube = 5000.0 + sum(_component(rng, k, exact=True) for k in COMPONENTS)
    r = noise_3d(cube)
    for k in COMPONENTS:
        assert r.sigma_raw[k] == pytest.approx(TRUE[k], rel=1e-9), k
    assert r.mean_counts == pytest.approx(5000.0, rel=1e-12)


def test_random_components_within_their_uncertainty() -> None:
    # One cube: every component within 3 of its reported sigmas. Twenty cubes: the pulls
    # (estimate - truth) / sigma have mean within 3/sqrt(20) ... and spread near 1 (an honest
    # uncertainty, common practice; GUM JCGM 100:2008).
    pulls = {k: [] for k in COMPONENTS}
    for seed in range(20):
        rng = np.random.default_rng(100 + seed)
        cube = 1000.0 + sum(_component(rng, k, exact=False) for k in COMPONENTS)
        r = noise_3d(cube)
        for k in COMPONENTS:
            pulls[k].append((r.sigma[k] - TRUE[k]) / r.sigma_uncertainty[k])
    for k in COMPONENTS:
        p = np.array(pulls[k])
        assert abs(p[0]) < 3.0, k
        assert abs(p.mean()) < 1.0, (k, p.mean())     # 4.5 standard errors of a mean of 20
        assert 0.5 < p.std() < 1.6, (k, p.std())      # chi-square spread of 20 values
    # The raw D'Agostino & Webb RMS of a coarse component carries the finer ones: N_v holds
    # N_tv / sqrt(T) and N_tvh / sqrt(T H) and N_vh / sqrt(H) on top of sigma_v.
    assert r.sigma_raw["v"] > r.sigma["v"]


def test_simulated_camera_noise_in_mk() -> None:
    # The simulated camera (no bad pixels) has white temporal noise sigma = NETD x SiTF and a
    # fixed pattern only: sigma_tvh / SiTF = 50 mK (after removing the ADC's 1/12 count^2,
    # Sheppard), sigma_t, sigma_tv, sigma_th near 0, sigma_vh the offset and gain pattern.
    t = truth_from_mapping(yaml.safe_load(DEMO.read_text()))
    g = dataclasses.replace(t.geometry, width=80, height=64, cx=None, cy=None, defects=())
    t = dataclasses.replace(t, geometry=g, dead_fraction=0.0, hot_fraction=0.0,
                            noisy_fraction=0.0, unresponsive_fraction=0.0)
    r = CameraRenderer(t, seed=4)
    scene = SceneState(30.0, 20.0, OpenAperture())
    stack = np.stack([r.render(scene, i) for i in range(24)])
    sitf = t.sitf_counts_per_k(30.0)
    res = noise_3d(stack, sitf)
    tvh = math.sqrt(res.sigma["tvh"] ** 2 - 1.0 / 12.0)
    u = res.sigma_uncertainty["tvh"]
    assert 1000.0 * tvh / sitf == pytest.approx(50.0, abs=3 * 1000.0 * u / sitf)
    assert res.in_mk()["tvh"] == pytest.approx(1000.0 * res.sigma["tvh"] / sitf, rel=1e-12)
    for k in ("t", "tv", "th"):
        assert res.sigma[k] < 3 * res.sigma_uncertainty[k] + 1e-9, k
    level = float(r.render_mean(scene).mean()) - t.offset_counts
    fpn = math.hypot(t.offset_fpn_counts, t.gain_fpn_rel * level)
    spatial = math.sqrt(res.sigma["vh"] ** 2 + res.sigma["v"] ** 2 + res.sigma["h"] ** 2)
    # a sample of 5,120 pixels: relative standard error of an RMS ~ 1/sqrt(2 x 5120) = 1 %
    assert spatial == pytest.approx(fpn, rel=0.04)
    json.dumps(res.to_dict())


def test_bad_input_is_refused_plainly() -> None:
    with pytest.raises(ValueError, match="frames, rows, cols"):
        noise_3d(np.zeros((5, 5)))
    cube = np.zeros((3, 4, 5))
    cube[1, 1, 1] = np.nan
    with pytest.raises(ValueError, match="NaN"):
        noise_3d(cube)


def test_bad_pixels_replaced_by_their_neighbours() -> None:
    # A hot pixel (full scale) would add (16383 - 1000)^2 / (V H) to the fixed-pattern variance;
    # replaced by its neighbours' mean the cube's components come back as without it.
    rng = np.random.default_rng(9)
    cube = 1000.0 + rng.normal(0, 3.0, (T, V, H)) + rng.normal(0, 2.0, (1, V, H))
    clean = noise_3d(cube)
    spoilt = cube.copy()
    spoilt[:, 10, 12] = 16383.0
    mask = np.zeros((V, H), dtype=bool)
    mask[10, 12] = True
    assert noise_3d(spoilt).sigma["vh"] > 10 * clean.sigma["vh"]
    fixed = noise_3d(replace_bad_pixels(spoilt, mask))
    for k in ("vh", "tvh"):
        assert fixed.sigma[k] == pytest.approx(clean.sigma[k], rel=0.01)
