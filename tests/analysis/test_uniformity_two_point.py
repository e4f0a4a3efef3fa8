"""Gain and offset non-uniformity from two flats (analysis/uniformity.py) vs the simulator.

Truth (simulators/camera_truth.py): gain pattern 1 + 0.3 % N(0, 1), offset pattern 25 counts
N(0, 1). EMVA 1288 (4.0) separates the two with two illumination levels (PRNU from the response,
DSNU from the dark/offset part); a std over N samples is uncertain by about 1/sqrt(2N).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest
import yaml

from analysis.badpixels import bad_pixel_map
from analysis.targets import OpenAperture
from analysis.uniformity import two_point_uniformity, uniformity
from simulators.camera_render import CameraRenderer, SceneState
from simulators.camera_truth import truth_from_mapping

DEMO = Path(__file__).resolve().parents[2] / "station" / "data" / "demo_camera_truth.yaml"


def test_gain_and_offset_patterns_are_separated() -> None:
    t = truth_from_mapping(yaml.safe_load(DEMO.read_text()))
    g = dataclasses.replace(t.geometry, width=200, height=160, cx=None, cy=None, defects=())
    t = dataclasses.replace(t, geometry=g)
    r = CameraRenderer(t, seed=2)
    results = []
    for cool_c, warm_c in ((25.0, 35.0), (40.0, 60.0)):
        cool = np.stack([r.render(SceneState(cool_c, 20.0, OpenAperture()), i, "c")
                         for i in range(16)])
        warm = np.stack([r.render(SceneState(warm_c, 20.0, OpenAperture()), i, "w")
                         for i in range(16)])
        bad = bad_pixel_map(cool, warm)
        noise = tuple(float(s.astype(float).var(axis=0, ddof=1)[~bad.mask].mean()) / 16
                      for s in (cool, warm))
        results.append(two_point_uniformity(cool.mean(axis=0), warm.mean(axis=0), bad.mask,
                                            sitf_counts_per_k=t.sitf_counts_per_k(30.0),
                                            temporal_variance_of_means=noise))
        old = uniformity(cool.mean(axis=0))
        results[-1].conditions["old_percent"] = old.nonuniformity_percent
    good = ~bad.mask
    n = int(good.sum())
    true_gain = 100.0 * float(r.gain_map[good].std(ddof=1))
    true_off = float(r.offset_map[good].std(ddof=1))
    for res in results:
        # the 16-frame means' temporal noise (sqrt(2) x 4.9 / 4 = 1.7 counts on a response of
        # 940 counts, 0.18 %) is removed; what is left is the fixed pattern
        assert res.gain_nonuniformity_percent == pytest.approx(true_gain, rel=0.08)
        assert res.offset_nonuniformity_counts == pytest.approx(true_off, rel=0.05)
    # the same pattern at two levels gives the same figures (the one-flat percentage does not);
    # 5 %: the regression scales the means' noise by (1 - k), k = S_cool / dS of 3 to 6
    a, b = results
    assert n > 30000
    assert a.offset_nonuniformity_counts == pytest.approx(b.offset_nonuniformity_counts,
                                                          rel=0.05)
    assert a.conditions["old_percent"] != pytest.approx(b.conditions["old_percent"], rel=0.05)
    v = a.verdicts({"max_gain_nonuniformity_percent": 1.0})
    assert [x.status for x in v] == ["PASS"]
    assert a.offset_nonuniformity_k == pytest.approx(
        a.offset_nonuniformity_counts / t.sitf_counts_per_k(30.0))
