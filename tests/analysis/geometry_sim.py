"""Small simulated cameras and the exact boresight truth for the boresight, alignment and FOV
tests. Small frames keep each render to a millisecond or so."""

from __future__ import annotations

import numpy as np
from scipy import optimize

from analysis.geometry import CameraGeometry, project, to_camera_frame
from analysis.targets import SinglePinhole
from simulators.camera_render import CameraRenderer, SceneState
from simulators.camera_truth import CameraTruth

F_COLL = 500.0
PINHOLE = SinglePinhole(diameter_mm=1.0)
AXIS = np.array([[0.0, 0.0, 1.0]])


def truth_camera(geometry: CameraGeometry, **kw: float) -> CameraTruth:
    """A camera with the demo camera's radiometry and noise (station/data/demo_camera_truth.yaml)
    and the given geometry."""
    base = dict(blur_sigma_px=0.6, responsivity_counts_per_radiance=150.0, offset_counts=500.0,
                netd_k=0.05, gain_fpn_rel=0.003, offset_fpn_counts=25.0)
    return CameraTruth(geometry=geometry, **{**base, **kw})


def renderer_for(geometry: CameraGeometry, seed: int, **kw: float) -> CameraRenderer:
    """A renderer whose fixed pattern *and* temporal noise both come from `seed` (a simulator
    may draw the fixed pattern from the truth's own seed), so seeds give independent frames."""
    return CameraRenderer(truth_camera(geometry, seed=seed, **kw), seed=seed)


def spot_at(geom: CameraGeometry, az: float, el: float,
            mount: np.ndarray | None = None) -> np.ndarray:
    """Exact (x, y) px of the on-axis pinhole at stage pose (az, el), forward model only.
    `mount`: the UUT's axes in the mount's frame (a mounting error), identity when None."""
    d = to_camera_frame(AXIS, az, el)
    if mount is not None:
        d = d @ mount   # row-wise M^T d: the direction in the tilted UUT's own frame
    return project(geom, d)[0]


def true_aligned_pose(geom: CameraGeometry, reference_px: tuple[float, float],
                      mount: np.ndarray | None = None) -> np.ndarray:
    """The stage pose (az, el) deg that puts the on-axis pinhole on `reference_px` in the true
    camera (and mount), solved numerically with the forward model alone (independent of the
    inverse model that analysis.alignment uses)."""
    ref = np.asarray(reference_px, dtype=float)
    sol, info, ok, msg = optimize.fsolve(lambda p: spot_at(geom, p[0], p[1], mount) - ref,
                                         [0.0, 0.0], xtol=1e-13, full_output=True)
    assert ok == 1, msg
    return sol


def frame(renderer: CameraRenderer, az: float, el: float, *, source_c: float = 50.0,
          plate_c: float = 20.0, target=PINHOLE, index: int = 0) -> np.ndarray:
    return renderer.render(SceneState(source_c, plate_c, target, az, el, F_COLL), index)
