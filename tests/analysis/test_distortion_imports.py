"""The distortion analysis after spot detection runs without scipy (import time matters for
`nightbench analyze distortion --frame`, which must finish within a second)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]

# Spot detection (analysis.centroid) is imported first and may use scipy itself; after it, every
# scipy module is dropped and any further scipy import fails, so the modules and the call below
# must do without.
CODE = r"""
import sys, importlib.abc
import numpy as np
import analysis.centroid  # noqa: F401

class NoScipy(importlib.abc.MetaPathFinder):
    def find_spec(self, name, path=None, target=None):
        if name == "scipy" or name.startswith("scipy."):
            raise ImportError(f"scipy import: {name}")
        return None

for name in [m for m in sys.modules if m == "scipy" or m.startswith("scipy.")]:
    del sys.modules[name]
sys.meta_path.insert(0, NoScipy())

import analysis.distortion, analysis.distortion_frames, analysis.undistort, analysis.results_io
from analysis.distortion import analyze_grid
from analysis.geometry import BrownConrady, CameraGeometry, collimator_directions, project
from analysis.undistort import undistortion_maps

nominal = CameraGeometry(640, 512, 17.0, 25.0)
X, Y = np.meshgrid(np.linspace(-80, 80, 15), np.linspace(-60, 60, 11))
dirs = collimator_directions(np.column_stack([X.ravel(), Y.ravel()]), 500.0)
camera = nominal.replace(distortion=BrownConrady(k1=-0.2, p1=2e-4), cx=322.0)
xy = project(camera, dirs) + np.random.default_rng(1).normal(0, 0.05, (len(dirs), 2))
result = analyze_grid(xy[::-1], dirs, nominal, sigma_px=0.05)
undistortion_maps(result.model.geometry)
print(sorted(m for m in sys.modules if m.startswith("scipy")), round(result.model.distortion.k1, 2))
"""


def test_distortion_analysis_needs_no_scipy() -> None:
    out = subprocess.run([sys.executable, "-c", CODE], capture_output=True, text=True, cwd=ROOT)
    assert out.returncode == 0, out.stderr
    # k1 recovered (the construction above is the truth) and no scipy module loaded.
    assert out.stdout.split() == ["[]", "-0.2"]
