"""The simulated camera's truth (simulators/camera_truth.py) and its demo file."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import yaml

from analysis.geometry import apply_brown_conrady
from analysis.radiometry import band_radiance_derivative
from simulators.camera_truth import truth_from_mapping

DEMO = Path(__file__).resolve().parents[2] / "station" / "data" / "demo_camera_truth.yaml"


def _demo_mapping() -> dict:
    return yaml.safe_load(DEMO.read_text())


def test_demo_truth_has_visible_barrel_at_the_corners() -> None:
    # Distortion % = 100 (actual - ideal) / ideal radial image height (ISO 17850:2015 definition;
    # barrel negative, Smith ch. 5). Demo target: about -1.5 % ... -3 % at the detector corners.
    t = truth_from_mapping(_demo_mapping())
    g = t.geometry
    corner = np.array([[(g.width - 1) / 2 / g.fx, (g.height - 1) / 2 / g.fy]])
    distorted = apply_brown_conrady(corner, g.distortion)
    pct = 100.0 * (np.linalg.norm(distorted) - np.linalg.norm(corner)) / np.linalg.norm(corner)
    assert -3.0 < pct < -1.5
    assert g.distortion.k1 < 0  # barrel is k1 < 0 (OpenCV convention, common practice)
    assert len(g.defects) == 1 and 0.3 <= g.defects[0].amplitude_px <= 0.5


def test_noise_is_derived_from_netd() -> None:
    # NETD = temporal noise / SiTF, SiTF = R dL/dT (Opt. Eng. 29(7) 1990 definition).
    t = truth_from_mapping(_demo_mapping())
    slope = band_radiance_derivative(273.15 + t.netd_reference_c, (8.0, 12.0))
    assert t.temporal_noise_counts == pytest.approx(
        0.050 * t.responsivity_counts_per_radiance * slope, rel=1e-12)
    json.dumps(t.to_json_dict())  # ground truth can be written to JSON


def test_errors_list_every_problem() -> None:
    d = _demo_mapping()
    d["geometry"]["width"] = "wide"
    d["geometry"]["distortion"]["k4"] = 0.1
    d["netd_k"] = "low"
    d["sparkle"] = 1
    with pytest.raises(ValueError) as err:
        truth_from_mapping(d)
    text = str(err.value)
    for part in ("geometry.width: expected a whole number", "geometry.distortion.k4: unknown key",
                 "netd_k: expected a number", "sparkle: unknown key"):
        assert part in text
    d = _demo_mapping()
    d["dead_fraction"] = 0.7
    with pytest.raises(ValueError, match="dead_fraction"):
        truth_from_mapping(d)
