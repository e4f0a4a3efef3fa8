"""Closed-loop alignment to the collimator axis on the simulated misaligned UUT.

Truth: the stage pose that puts the on-axis pinhole on the detector centre in the true camera,
solved numerically with the forward model (geometry_sim.true_aligned_pose). The loop only knows
the nominal model (the data sheet) and the rendered frames.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from analysis.alignment import (AlignmentFault, AlignmentIteration, align, next_decision)
from analysis.boresight import PinholeNotFound, find_pinhole
from analysis.geometry import BrownConrady, CameraGeometry, gimbal_rotation
from simulators.camera_render import CameraRenderer
from tests.analysis.geometry_sim import frame, spot_at, true_aligned_pose, truth_camera

# A 160 x 128 detector of 17 um behind 12.5 mm (12.4 x 9.9 deg): the lens 0.4 % longer than its
# data sheet, principal point 2.3 / -1.6 px off centre, 0.15 deg roll and visible barrel.
TRUE = CameraGeometry(160, 128, 17.0, 12.55, cx=79.5 + 2.3, cy=63.5 - 1.6, roll_deg=0.15,
                      distortion=BrownConrady(k1=-0.25))
NOMINAL = CameraGeometry(160, 128, 17.0, 12.5)
CENTRE = (79.5, 63.5)


def measure_on(renderer: CameraRenderer, full_scale: float):
    count = iter(range(10_000))

    def measure(pose):
        spot = find_pinhole(frame(renderer, pose[0], pose[1], index=next(count), source_c=90.0),
                            saturation=full_scale)
        return (spot.x, spot.y), (spot.sigma_x, spot.sigma_y)
    return measure


@pytest.mark.parametrize("start", [(0.0, 0.0), (3.0, -2.5), (-4.5, 3.0), (5.0, 3.5)])
def test_alignment_converges_from_several_start_poses(start) -> None:
    truth = truth_camera(TRUE)
    r = CameraRenderer(truth, seed=7)
    seen = []
    result = align(measure_on(r, truth.full_scale), start, CENTRE, NOMINAL, tolerance_px=0.1,
                   max_iterations=6, on_iteration=seen.append)
    # Bounded: the model is right to 0.4 % in scale, so each turn shrinks the offset ~250x.
    assert len(seen) <= 4
    assert seen[-1].residual_px <= 0.1
    assert [it.iteration for it in seen] == list(range(1, len(seen) + 1))
    want = true_aligned_pose(TRUE, CENTRE)
    # The converged pose against the truth within 3 sigma of its own stated uncertainty.
    assert abs(result.az_deg - want[0]) < 3 * result.sigma_az_deg
    assert abs(result.el_deg - want[1]) < 3 * result.sigma_el_deg
    assert result.sigma_az_deg < 0.006 and result.sigma_el_deg < 0.006   # < 0.1 mrad, 0.05 px


def test_wide_f_theta_alignment_converges_where_a_small_angle_loop_would_crawl() -> None:
    # 4 mm f-theta on 640 x 512 (160 deg): the pinhole starts 35 deg off axis.
    wide = CameraGeometry(640, 512, 17.0, 4.0, projection="equidistant", cx=330.0, cy=250.0)
    nominal = wide.replace(cx=None, cy=None)
    centre = (319.5, 255.5)
    measure = lambda pose: (tuple(spot_at(wide, *pose)), (0.01, 0.01))   # noise-free
    seen = []
    result = align(measure, (30.0, -20.0), centre, nominal, tolerance_px=0.01, max_iterations=8,
                   on_iteration=seen.append)
    assert len(seen) <= 4
    want = true_aligned_pose(wide, centre)
    assert (result.az_deg, result.el_deg) == pytest.approx(tuple(want), abs=1e-5)


@pytest.mark.parametrize("start", [(0.0, 0.0), (6.0, -4.0), (-8.0, 5.0)])
def test_alignment_converges_on_a_tilted_and_rolled_mount(start) -> None:
    # A mounting error the model knows nothing of: line of sight tilted 4 mrad right and 3 mrad
    # down, rolled 5 mrad, as R_y(az) R_x(el) R_z(roll) (the gimbal's own conventions), with
    # centroid noise of 0.02 px. Truth: the forward model with the same mount, solved.
    c, s = math.cos(5e-3), math.sin(5e-3)
    mount = gimbal_rotation(math.degrees(4e-3), math.degrees(-3e-3)) @ np.array(
        [[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])
    rng = np.random.default_rng(11)

    def measure(pose):
        spot = spot_at(TRUE, pose[0], pose[1], mount) + rng.normal(0.0, 0.02, 2)
        return tuple(spot), (0.02, 0.02)
    seen = []
    result = align(measure, start, CENTRE, NOMINAL, tolerance_px=0.1, max_iterations=6,
                   on_iteration=seen.append)
    assert len(seen) <= 4
    want = true_aligned_pose(TRUE, CENTRE, mount)
    assert abs(result.az_deg - want[0]) < 3 * result.sigma_az_deg
    assert abs(result.el_deg - want[1]) < 3 * result.sigma_el_deg


def test_a_model_three_times_too_short_diverges_with_a_clear_fault() -> None:
    truth = truth_camera(TRUE)
    wrong = NOMINAL.replace(focal_length_mm=12.5 / 3.0)   # every correction 3x too large
    with pytest.raises(AlignmentFault, match="diverges") as err:
        align(measure_on(CameraRenderer(truth, seed=1), truth.full_scale), (0.5, 0.3), CENTRE,
              wrong, tolerance_px=0.1, max_iterations=10)
    assert len(err.value.history) <= 4   # stopped as soon as it grew twice / past 1.5x the start


def test_out_of_iterations_and_out_of_limits_are_faults_that_move_nothing() -> None:
    truth = truth_camera(TRUE)
    measure = measure_on(CameraRenderer(truth, seed=2), truth.full_scale)
    with pytest.raises(AlignmentFault, match="did not converge in 1 iterations"):
        align(measure, (3.0, 2.0), CENTRE, NOMINAL, tolerance_px=0.1, max_iterations=1)
    with pytest.raises(AlignmentFault, match="outside the stage's soft limits"):
        align(measure, (3.0, 2.0), CENTRE, NOMINAL, tolerance_px=0.1, max_iterations=5,
              limits_deg=((0.5, 5.0), (0.5, 5.0)))   # the aligned pose is at (0.18, 0.12)


def test_spot_outside_the_field_stops_the_loop_with_the_cause() -> None:
    truth = truth_camera(TRUE)
    measure = measure_on(CameraRenderer(truth, seed=3), truth.full_scale)
    with pytest.raises(PinholeNotFound):
        align(measure, (9.0, 0.0), CENTRE, NOMINAL)   # half field is 6.2 deg: nothing seen


def test_decision_rule() -> None:
    def it(n, r):
        return AlignmentIteration(n, (0.0, 0.0), (r, 0.0), (0.01, 0.01), (r, 0.0), (0.0, 0.0))
    assert next_decision([it(1, 10.0), it(2, 0.05)], 0.1, 5).action == "converged"
    assert next_decision([it(1, 10.0), it(2, 1.0)], 0.1, 5).action == "move"
    assert "diverges" in next_decision([it(1, 1.0), it(2, 2.0)], 0.1, 5).reason
    assert next_decision([it(1, 1.0), it(2, 0.9)], 0.1, 2).action == "fault"
