"""Closed-loop alignment of the UUT to the collimator axis: pixel offset -> stage angles.

Why not a small-angle shortcut: on a wide-field UUT (an f-theta lens of 60 deg, say) one pixel is
not the same angle everywhere, and the azimuth and elevation of an az-over-el gimbal do not add
like vectors once the elevation is not zero. So every conversion goes through the UUT's model
(pixel -> direction, the exact inverse of `analysis.geometry.project` without local defects) and
the gimbal's rotation (`analysis.geometry.gimbal_rotation`, ``R = R_y(az) R_x(el)``).

The geometry of one correction
------------------------------
At stage pose ``R0`` the real camera frame is ``R0 M``, with ``M`` the unknown mounting rotation.
The on-axis pinhole (bench direction ``e_z``) is seen in the camera frame at ``d``, the direction
of its centroid through the model: ``M d = R0^T e_z``. We want the pose ``R1`` at which the
reference pixel's direction ``r`` sees the pinhole: ``M r = R1^T e_z``. ``M`` is estimated as the
smallest rotation taking ``d`` to ``R0^T e_z`` (Rodrigues' formula); the rotation about that axis,
which one spot cannot see, changes ``M r`` only by (that angle) x |r - d|, so the loop converges
quadratically. ``R1^T e_z = t`` is then solved in closed form for the gimbal:
``t = (-sin az, sin el cos az, cos el cos az)``, so ``az = -asin(t_x)``, ``el = atan2(t_y, t_z)``.

Axis order: pixel positions are (x, y) = (column, row); poses are (az, el) in degrees.

>>> from analysis.geometry import CameraGeometry, project, to_camera_frame
>>> g = CameraGeometry(640, 512, 17.0, 25.0)
>>> axis = np.array([[0.0, 0.0, 1.0]])
>>> spot = project(g, to_camera_frame(axis, 1.0, -0.5))[0]   # pinhole seen at pose (1, -0.5)
>>> az, el = aligned_pose(spot, g.principal_point, (1.0, -0.5), g)
>>> round(az, 9) + 0.0, round(el, 9) + 0.0                  # the pose that centres it: (0, 0)
(0.0, 0.0)
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from collections.abc import Callable
from typing import Sequence

import numpy as np

from analysis.geometry import (CameraGeometry, field_angle_of_radius, gimbal_rotation,
                               undistort_normalized)

__all__ = ["pixel_to_direction", "axis_direction_at", "pose_seeing_axis_at",
           "aligned_pose",
           "aligned_pose_with_uncertainty", "AlignmentIteration", "AlignmentDecision",
           "next_decision", "converged_boresight", "ConvergedPose",
           "AlignmentFault", "align"]

_E_Z = np.array([0.0, 0.0, 1.0])


def pixel_to_direction(geom: CameraGeometry, pixels: np.ndarray) -> np.ndarray:
    """Pixel positions (N, 2) (x, y) -> unit camera-frame directions (N, 3).

    The exact inverse of `analysis.geometry.project` (camera matrix with skew and aspect,
    Brown-Conrady by fixed-point iteration as cv2.undistortPoints does, roll, then the
    projection's radial law), local defects excepted: a UUT model has none.

    >>> g = CameraGeometry(640, 512, 17.0, 25.0)
    >>> d = pixel_to_direction(g, np.array([[g.principal_point[0] + 100.0, g.principal_point[1]]]))
    >>> angle = math.degrees(math.atan2(d[0, 0], d[0, 2]))
    >>> round(angle, 6) == round(math.degrees(math.atan(100 * 0.017 / 25)), 6)
    True
    """
    p = np.asarray(pixels, dtype=float).reshape(-1, 2)
    cx, cy = geom.principal_point
    yd = (p[:, 1] - cy) / geom.fy
    xd = (p[:, 0] - cx) / geom.fx - math.tan(math.radians(geom.skew_deg)) * yd
    xy = np.column_stack([xd, yd])
    if not geom.distortion.is_zero:
        xy = undistort_normalized(xy, geom.distortion, iterations=50)
    xn, yn = xy[:, 0], xy[:, 1]
    if geom.roll_deg:
        c, s = math.cos(math.radians(geom.roll_deg)), math.sin(math.radians(geom.roll_deg))
        xn, yn = c * xn - s * yn, s * xn + c * yn
    if geom.projection == "rectilinear":
        d = np.column_stack([xn, yn, np.ones_like(xn)])
        return d / np.linalg.norm(d, axis=1, keepdims=True)
    r = np.hypot(xn, yn)
    theta = field_angle_of_radius(r, geom.projection)
    safe = np.where(r > 0, r, 1.0)
    scale = np.where(r > 0, np.sin(theta) / safe, 0.0)
    return np.column_stack([xn * scale, yn * scale, np.cos(theta)])


def axis_direction_at(az_deg: float, el_deg: float) -> np.ndarray:
    """Camera-frame direction (3,) of the collimator axis at a stage pose (no mounting error)."""
    return gimbal_rotation(az_deg, el_deg).T @ _E_Z


def pose_seeing_axis_at(direction: np.ndarray) -> tuple[float, float]:
    """The gimbal pose (az, el) deg at which the collimator axis appears along `direction`
    (camera frame, no mounting error): ``R(az, el)^T e_z = direction``, solved in closed form."""
    t = np.asarray(direction, dtype=float)
    t = t / np.linalg.norm(t)
    az = -math.asin(max(-1.0, min(1.0, float(t[0]))))
    el = math.atan2(float(t[1]), float(t[2]))
    return math.degrees(az), math.degrees(el)


def _smallest_rotation(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """The rotation of least angle taking unit vector a to unit vector b (Rodrigues' formula)."""
    v = np.cross(a, b)
    s = float(np.linalg.norm(v))
    c = float(a @ b)
    if s < 1e-15:
        if c > 0:
            return np.eye(3)
        raise ValueError("spot direction opposite the collimator axis: no unique rotation")
    k = v / s
    kx = np.array([[0.0, -k[2], k[1]], [k[2], 0.0, -k[0]], [-k[1], k[0], 0.0]])
    return np.eye(3) + s * kx + (1.0 - c) * (kx @ kx)


def aligned_pose(spot_px: Sequence[float], reference_px: Sequence[float],
                 pose_deg: Sequence[float], geom: CameraGeometry) -> tuple[float, float]:
    """Stage pose (az, el) deg that brings the on-axis pinhole from `spot_px` (seen at
    `pose_deg`) onto `reference_px`, through the UUT model `geom` and the az-over-el gimbal.

    See the module docstring for the derivation; exact when the mounting error has no roll
    about the spot's direction, and converging quadratically otherwise.
    """
    d = pixel_to_direction(geom, np.asarray(spot_px, dtype=float))[0]
    r = pixel_to_direction(geom, np.asarray(reference_px, dtype=float))[0]
    b = axis_direction_at(float(pose_deg[0]), float(pose_deg[1]))
    mount = _smallest_rotation(d, b)
    return pose_seeing_axis_at(mount @ r)


def aligned_pose_with_uncertainty(
    spot_px: Sequence[float], spot_sigma_px: Sequence[float], reference_px: Sequence[float],
    pose_deg: Sequence[float], geom: CameraGeometry, *, stage_sigma_deg: float = 0.0,
    model_scale_sigma_rel: float = 0.0, model_roll_sigma_deg: float = 0.0,
) -> tuple[tuple[float, float], tuple[float, float]]:
    """`aligned_pose` and its 1-sigma (az, el) deg: the centroid's sigma propagated through the
    numerical Jacobian (GUM, JCGM 100:2008, 5.1.2, uncorrelated inputs), the stage reading's
    sigma, and the model's own uncertainty: a relative uncertainty of its focal length (which
    scales the correction from pose to boresight) and of its roll (which turns the correction),
    all added in quadrature. The model terms vanish as the spot nears the reference pixel, which
    is why the closed loop is the reference path."""
    base = np.array(aligned_pose(spot_px, reference_px, pose_deg, geom))
    var = np.zeros(2)
    h = 0.01
    for i, s in enumerate(spot_sigma_px):
        shifted = np.array(spot_px, dtype=float)
        shifted[i] += h
        grad = (np.array(aligned_pose(shifted, reference_px, pose_deg, geom)) - base) / h
        var += (grad * float(s)) ** 2
    correction = base - np.asarray(pose_deg, dtype=float)
    turned = np.array([-correction[1], correction[0]]) * math.radians(model_roll_sigma_deg)
    var += (correction * model_scale_sigma_rel) ** 2 + turned ** 2 + stage_sigma_deg ** 2
    return (float(base[0]), float(base[1])), (float(math.sqrt(var[0])), float(math.sqrt(var[1])))


@dataclass(frozen=True)
class AlignmentIteration:
    """One turn of the loop: where the stage was, where the spot was, how far from the reference
    pixel, and the pose the model asks for next."""

    iteration: int
    pose_deg: tuple[float, float]
    spot_px: tuple[float, float]
    spot_sigma_px: tuple[float, float]
    offset_px: tuple[float, float]
    next_pose_deg: tuple[float, float]

    @property
    def residual_px(self) -> float:
        return math.hypot(*self.offset_px)

    def to_dict(self) -> dict:
        return {"iteration": self.iteration, "pose_deg": list(self.pose_deg),
                "spot_px": list(self.spot_px), "spot_sigma_px": list(self.spot_sigma_px),
                "offset_px": list(self.offset_px), "residual_px": self.residual_px,
                "next_pose_deg": list(self.next_pose_deg)}


@dataclass(frozen=True)
class AlignmentDecision:
    """What the loop does after an iteration: ``converged``, ``move`` or ``fault`` (with why)."""

    action: str
    reason: str = ""


def next_decision(history: Sequence[AlignmentIteration], tolerance_px: float,
                  max_iterations: int, *, diverge_factor: float = 1.5) -> AlignmentDecision:
    """Decide after the last iteration of `history` (pure, so the rule is testable alone).

    Converged when the residual is within `tolerance_px`. Diverging when the residual grew by
    more than `diverge_factor` over the previous one twice in a row, or exceeds the first
    residual by that factor (a wrong sign or a wrong model scale makes every step worse);
    residuals below a noise floor (the tolerance, or 3 sigma of the centroid) never count as
    growth.
    Out of iterations after `max_iterations`.
    """
    last = history[-1]
    if last.residual_px <= tolerance_px:
        return AlignmentDecision("converged", f"residual {last.residual_px:.3f} px within "
                                              f"{tolerance_px:g} px after {len(history)} "
                                              f"iteration(s)")
    if len(history) >= 2:
        first = history[0].residual_px
        # Growth below a noise floor (the tolerance, or 3 sigma of the centroid) is noise.
        floor = max(tolerance_px, 3.0 * math.hypot(*last.spot_sigma_px))
        grew = [b.residual_px > diverge_factor * max(a.residual_px, floor)
                for a, b in zip(history[:-1], history[1:])]
        if (last.residual_px > diverge_factor * max(first, floor)
                or (len(grew) >= 2 and grew[-1] and grew[-2])):
            return AlignmentDecision("fault", "alignment diverges: residual went "
                                     + " -> ".join(f"{h.residual_px:.2f}" for h in history)
                                     + " px; check the UUT model (focal length, projection) and "
                                       "the stage axes' directions")
    if len(history) >= max_iterations:
        return AlignmentDecision("fault", f"alignment did not converge in {max_iterations} "
                                 f"iterations (residual {last.residual_px:.3f} px, tolerance "
                                 f"{tolerance_px:g} px); raise max_iterations or the tolerance, "
                                 "or check the stage's repeatability")
    return AlignmentDecision("move")


@dataclass(frozen=True)
class ConvergedPose:
    """The boresight relative to the mount: the stage pose (az, el) deg at which the reference
    pixel looks along the collimator axis, with its 1-sigma uncertainty, and the loop's record."""

    az_deg: float
    el_deg: float
    sigma_az_deg: float
    sigma_el_deg: float
    iterations: tuple[AlignmentIteration, ...] = field(default_factory=tuple)

    @property
    def error_mrad(self) -> float:
        """Angle between the line of sight at the mount's zero and the collimator axis:
        ``acos(cos az cos el)`` (exact for the az-over-el gimbal: the angle of ``R^T e_z``)."""
        a, e = math.radians(self.az_deg), math.radians(self.el_deg)
        return 1000.0 * math.acos(max(-1.0, min(1.0, math.cos(a) * math.cos(e))))


def converged_boresight(last: AlignmentIteration, reference_px: Sequence[float],
                        geom: CameraGeometry, *, stage_sigma_deg: float = 0.0,
                        history: Sequence[AlignmentIteration] = ()) -> ConvergedPose:
    """The boresight from the last (converged) iteration: its pose plus the residual correction,
    so a tolerance of a fraction of a pixel does not bias the answer."""
    (az, el), (saz, sel) = aligned_pose_with_uncertainty(
        last.spot_px, last.spot_sigma_px, reference_px, last.pose_deg, geom,
        stage_sigma_deg=stage_sigma_deg)
    return ConvergedPose(az, el, saz, sel, tuple(history))


class AlignmentFault(RuntimeError):
    """The loop stopped without converging; the message says why. ``history`` holds every
    iteration done, for the record."""

    def __init__(self, message: str, history: Sequence[AlignmentIteration] = ()) -> None:
        super().__init__(message)
        self.history = tuple(history)


Measure = Callable[[tuple[float, float]], tuple[tuple[float, float], tuple[float, float]]]


def align(measure: Measure, start_pose_deg: Sequence[float], reference_px: Sequence[float],
          geom: CameraGeometry, *, tolerance_px: float = 0.25, max_iterations: int = 8,
          limits_deg: Sequence[tuple[float, float]] | None = None, stage_sigma_deg: float = 0.0,
          on_iteration: Callable[[AlignmentIteration], None] = lambda it: None) -> ConvergedPose:
    """The closed loop: measure at a pose, convert the offset to the pose that centres the spot,
    move there, repeat, until the spot sits on `reference_px` within `tolerance_px`.

    `measure(pose)` moves the stage to `pose` (az, el) deg, takes a frame and returns the spot's
    centroid (x, y) and its 1-sigma; it raises to stop the loop (pinhole not found, spot at the
    frame edge). `limits_deg` ((az_lo, az_hi), (el_lo, el_hi)) refuses a next pose outside the
    stage's soft limits before anything moves. Every iteration goes to `on_iteration` first.
    Raises `AlignmentFault` when it diverges, runs out of iterations or would leave the limits.
    """
    if max_iterations < 1:
        raise ValueError("max_iterations must be at least 1")
    history: list[AlignmentIteration] = []
    pose = (float(start_pose_deg[0]), float(start_pose_deg[1]))
    while True:
        spot, sigma = measure(pose)
        nxt = aligned_pose(spot, reference_px, pose, geom)
        it = AlignmentIteration(len(history) + 1, pose, (float(spot[0]), float(spot[1])),
                                (float(sigma[0]), float(sigma[1])),
                                (float(spot[0]) - float(reference_px[0]),
                                 float(spot[1]) - float(reference_px[1])), nxt)
        history.append(it)
        on_iteration(it)
        decision = next_decision(history, tolerance_px, max_iterations)
        if decision.action == "converged":
            return converged_boresight(it, reference_px, geom, stage_sigma_deg=stage_sigma_deg,
                                       history=history)
        if decision.action == "fault":
            raise AlignmentFault(decision.reason, history)
        if limits_deg is not None:
            for name, value, (lo, hi) in zip(("az", "el"), nxt, limits_deg):
                if not lo <= value <= hi:
                    raise AlignmentFault(
                        f"alignment asks for {name} = {value:.4f} deg, outside the stage's soft "
                        f"limits {lo:g} .. {hi:g} deg (nothing was moved); start nearer the "
                        "collimator axis or check the UUT mounting", history)
        pose = nxt
