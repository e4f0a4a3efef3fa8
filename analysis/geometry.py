"""The optical forward model of the bench: target plate -> collimator -> gimbal -> UUT pixels.

Analysis and simulation share this one model, so a distortion fit and the simulated camera can
never disagree about what "ideal" means.

Conventions (used at every boundary of this module)
---------------------------------------------------
* Pixel coordinates are ``(x, y) = (column, row)``; the origin is the *centre* of the top-left
  pixel, so pixel ``(i, j)`` covers ``[i - 0.5, i + 0.5]`` in x. Arrays of points are ``(N, 2)``
  in that order.
* Camera frame (OpenCV's): ``+z`` along the line of sight, ``+x`` toward increasing column,
  ``+y`` toward increasing row (down in the displayed image).
* Bench frame: coincides with the camera frame when the gimbal is at az = el = 0: ``+z`` from the
  UUT into the collimator, ``+x`` to the right and ``+y`` downward as seen by the UUT.
* Collimator: paraxially the collimator (focal length F) and the UUT (focal length f) form a relay
  of lateral magnification ``-f/F``: the image of the target plate is *inverted*. Plate
  coordinates ``(x, y)`` in mm have their axes parallel to the image's x and y axes (projected
  along the unfolded optical axis), so a pinhole at ``(+x, +y)`` is seen in the bench direction
  ``(-x, -y, F) / norm`` and lands at ``(cx - f x / F, cy - f y / F)`` on a distortion-free
  rectilinear UUT (W. J. Smith, *Modern Optical Engineering*, paraxial imaging). A fold mirror's
  extra reversal, if a bench has one, is described by the station's target definition.
* Gimbal: azimuth over elevation. The outer azimuth axis is the bench vertical (``y``), the inner
  elevation axis is the horizontal axis carried by the azimuth stage. Positive azimuth turns the
  line of sight toward ``+x`` (right); positive elevation raises it (toward ``-y``). The UUT's
  orientation in the bench frame is ``R = R_y(az) @ R_x(el)``; its line of sight is
  ``(cos el sin az, -sin el, cos el cos az)``.
* Roll: the detector axes are rotated by ``roll_deg`` about ``+z`` (from ``+x`` toward ``+y``),
  so scene features appear rotated by ``-roll_deg`` in the image.
* Distortion: Brown-Conrady in OpenCV's convention (calib3d documentation), coefficient order
  ``(k1, k2, p1, p2, k3)``, applied to normalized coordinates after projection and roll.
  Pixel coordinates: ``u = fx (x'' + tan(skew) y'') + cx``, ``v = fy y'' + cy``.
* Local defects: a displacement bump in pixels, added after the camera matrix.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np

PROJECTIONS = ("rectilinear", "equidistant", "stereographic", "equisolid", "orthographic")


@dataclass(frozen=True)
class BrownConrady:
    """Radial (k1, k2, k3) and tangential (p1, p2) distortion, OpenCV convention and order."""

    k1: float = 0.0
    k2: float = 0.0
    p1: float = 0.0
    p2: float = 0.0
    k3: float = 0.0

    def as_opencv(self) -> np.ndarray:
        """Coefficients in OpenCV's order ``[k1, k2, p1, p2, k3]``."""
        return np.array([self.k1, self.k2, self.p1, self.p2, self.k3], dtype=float)

    @property
    def is_zero(self) -> bool:
        return not any((self.k1, self.k2, self.p1, self.p2, self.k3))


@dataclass(frozen=True)
class LocalDefect:
    """A local image displacement: ``amplitude_px * exp(-d^2 / (2 sigma_px^2))`` along
    ``direction_deg`` (0 = +x, 90 = +y), centred at pixel ``(x_px, y_px)``.

    Models a lens or window flaw that shifts spots in one region of the field only.
    """

    x_px: float
    y_px: float
    amplitude_px: float
    sigma_px: float
    direction_deg: float = 0.0

    def __post_init__(self) -> None:
        if not self.sigma_px > 0:
            raise ValueError(f"LocalDefect.sigma_px must be > 0, got {self.sigma_px}")


@dataclass(frozen=True)
class CameraGeometry:
    """Everything that decides where a field direction lands on the detector."""

    width: int
    height: int
    pixel_pitch_um: float
    focal_length_mm: float
    projection: str = "rectilinear"
    cx: float | None = None
    cy: float | None = None
    aspect: float = 1.0
    skew_deg: float = 0.0
    roll_deg: float = 0.0
    distortion: BrownConrady = field(default_factory=BrownConrady)
    defects: tuple[LocalDefect, ...] = ()

    def __post_init__(self) -> None:
        problems = []
        if int(self.width) <= 0 or int(self.height) <= 0:
            problems.append(f"width/height must be positive, got {self.width}x{self.height}")
        if not self.pixel_pitch_um > 0:
            problems.append(f"pixel_pitch_um must be > 0, got {self.pixel_pitch_um}")
        if not self.focal_length_mm > 0:
            problems.append(f"focal_length_mm must be > 0, got {self.focal_length_mm}")
        if self.projection not in PROJECTIONS:
            problems.append(f"projection {self.projection!r} unknown; use one of {PROJECTIONS}")
        if not self.aspect > 0:
            problems.append(f"aspect must be > 0, got {self.aspect}")
        if not abs(self.skew_deg) < 45:
            problems.append(f"skew_deg must be within +/-45, got {self.skew_deg}")
        if problems:
            raise ValueError("CameraGeometry: " + "; ".join(problems))
        # Accept lists from config loaders; keep the dataclass hashable.
        object.__setattr__(self, "defects", tuple(self.defects))

    @property
    def fx(self) -> float:
        """Focal length in pixels along x."""
        return self.focal_length_mm * 1000.0 / self.pixel_pitch_um

    @property
    def fy(self) -> float:
        return self.fx * self.aspect

    @property
    def principal_point(self) -> tuple[float, float]:
        """(cx, cy) in pixels; defaults to the detector centre ``((w-1)/2, (h-1)/2)``."""
        cx = (self.width - 1) / 2.0 if self.cx is None else float(self.cx)
        cy = (self.height - 1) / 2.0 if self.cy is None else float(self.cy)
        return cx, cy

    @property
    def ifov_mrad(self) -> float:
        """Instantaneous field of view of one pixel on axis (pitch / focal length)."""
        return self.pixel_pitch_um / self.focal_length_mm

    def camera_matrix(self) -> np.ndarray:
        """3x3 OpenCV camera matrix K (skew in K[0, 1] = fx tan(skew))."""
        cx, cy = self.principal_point
        return np.array([[self.fx, self.fx * math.tan(math.radians(self.skew_deg)), cx],
                         [0.0, self.fy, cy],
                         [0.0, 0.0, 1.0]])

    def replace(self, **changes: object) -> CameraGeometry:
        """A copy with some fields changed (validated like a new one). The same as
        dataclasses.replace for this class (every field is an init field), at a third of its
        cost: the fit and the delta method build dozens of geometries per analysis."""
        return type(self)(**{**self.__dict__, **changes})


def _as_points(a: np.ndarray, cols: int, what: str) -> np.ndarray:
    arr = np.asarray(a, dtype=float)
    if arr.ndim == 1 and arr.shape[0] == cols:
        arr = arr[None, :]
    if arr.ndim != 2 or arr.shape[1] != cols:
        raise ValueError(f"{what} must have shape (N, {cols}), got {arr.shape}")
    return arr


def collimator_directions(points_mm: np.ndarray, focal_length_mm: float) -> np.ndarray:
    """Target plate points (N, 2) mm, (x, y) -> unit directions (N, 3) in the bench frame.

    The collimator inverts the plate (see module docstring): ``d = (-x, -y, F) / norm``, so the
    field angle of a point is ``atan(r / F)`` (paraxial collimator, W. J. Smith).

    >>> d = collimator_directions(np.array([[10.0, 0.0]]), 500.0)
    >>> round(float(np.degrees(field_angles(d)[0])), 4)   # atan(10 / 500)
    1.1458
    """
    if not focal_length_mm > 0:
        raise ValueError(f"collimator focal length must be > 0 mm, got {focal_length_mm}")
    p = _as_points(points_mm, 2, "points_mm")
    d = np.column_stack([-p[:, 0], -p[:, 1], np.full(len(p), float(focal_length_mm))])
    return d / np.linalg.norm(d, axis=1, keepdims=True)


def _rot_x(deg: float) -> np.ndarray:
    c, s = math.cos(math.radians(deg)), math.sin(math.radians(deg))
    return np.array([[1.0, 0.0, 0.0], [0.0, c, -s], [0.0, s, c]])


def _rot_y(deg: float) -> np.ndarray:
    c, s = math.cos(math.radians(deg)), math.sin(math.radians(deg))
    return np.array([[c, 0.0, s], [0.0, 1.0, 0.0], [-s, 0.0, c]])


def gimbal_rotation(az_deg: float, el_deg: float) -> np.ndarray:
    """UUT orientation in the bench frame for an azimuth-over-elevation gimbal.

    ``R = R_y(az) @ R_x(el)``: elevation is applied about the axis carried by the azimuth
    stage (intrinsic composition). Columns are the camera axes expressed in the bench frame.
    """
    return _rot_y(az_deg) @ _rot_x(el_deg)


def to_camera_frame(directions_bench: np.ndarray, az_deg: float, el_deg: float) -> np.ndarray:
    """Bench-frame directions (N, 3) -> camera-frame directions for the given stage angles."""
    d = _as_points(directions_bench, 3, "directions_bench")
    return d @ gimbal_rotation(az_deg, el_deg)  # row-wise R^T d


def field_angles(directions: np.ndarray) -> np.ndarray:
    """Angle of each direction (N, 3) from +z, radians."""
    d = _as_points(directions, 3, "directions")
    rho = np.hypot(d[:, 0], d[:, 1])
    return np.arctan2(rho, d[:, 2])


def _radial_map(theta: np.ndarray, projection: str) -> np.ndarray:
    """Normalized image height (units of focal length) for field angle theta."""
    if projection == "rectilinear":
        return np.tan(theta)
    if projection == "equidistant":
        return theta
    if projection == "stereographic":
        return 2.0 * np.tan(theta / 2.0)
    if projection == "equisolid":
        return 2.0 * np.sin(theta / 2.0)
    if projection == "orthographic":
        return np.sin(theta)
    raise ValueError(f"projection {projection!r} unknown; use one of {PROJECTIONS}")


def field_angle_of_radius(r: np.ndarray, projection: str) -> np.ndarray:
    """Field angle (rad) of a normalized image height r: the inverse of the projection.

    >>> round(float(field_angle_of_radius(np.array([1.0]), "rectilinear")[0]), 6)  # atan(1)
    0.785398
    """
    r = np.asarray(r, dtype=float)
    if projection == "rectilinear":
        return np.arctan(r)
    if projection == "equidistant":
        return r
    if projection == "stereographic":
        return 2.0 * np.arctan(r / 2.0)
    if projection == "equisolid":
        return 2.0 * np.arcsin(np.clip(r / 2.0, -1.0, 1.0))
    if projection == "orthographic":
        return np.arcsin(np.clip(r, -1.0, 1.0))
    raise ValueError(f"projection {projection!r} unknown; use one of {PROJECTIONS}")


def ideal_normalized(geom: CameraGeometry, directions: np.ndarray) -> np.ndarray:
    """Camera-frame directions (N, 3) -> normalized (x', y') before distortion, after roll.

    Directions outside the projection's domain (behind the camera for rectilinear, beyond 90 deg
    for orthographic) give NaN.
    """
    d = _as_points(directions, 3, "directions")
    if geom.projection == "rectilinear":
        with np.errstate(divide="ignore", invalid="ignore"):
            z = np.where(d[:, 2] > 0, d[:, 2], np.nan)
            xn, yn = d[:, 0] / z, d[:, 1] / z
    else:
        rho = np.hypot(d[:, 0], d[:, 1])
        theta = np.arctan2(rho, d[:, 2])
        r = _radial_map(theta, geom.projection)
        if geom.projection == "orthographic":
            r = np.where(theta <= math.pi / 2, r, np.nan)
        safe = np.where(rho > 0, rho, 1.0)
        scale = np.where(rho > 0, r / safe, 0.0)
        xn, yn = d[:, 0] * scale, d[:, 1] * scale
    if geom.roll_deg:
        c, s = math.cos(math.radians(geom.roll_deg)), math.sin(math.radians(geom.roll_deg))
        xn, yn = c * xn + s * yn, -s * xn + c * yn
    return np.column_stack([xn, yn])


def apply_brown_conrady(xy_norm: np.ndarray, d: BrownConrady) -> np.ndarray:
    """Normalized (x', y') -> distorted (x'', y''), OpenCV calib3d formula (Brown 1966).

    >>> apply_brown_conrady(np.array([[0.5, 0.0]]), BrownConrady(k1=-0.1)).tolist()
    [[0.4875, 0.0]]
    """
    p = _as_points(xy_norm, 2, "xy_norm")
    x, y = p[:, 0], p[:, 1]
    r2 = x * x + y * y
    radial = 1.0 + r2 * (d.k1 + r2 * (d.k2 + r2 * d.k3))
    xy2 = 2.0 * x * y
    xd = x * radial + d.p1 * xy2 + d.p2 * (r2 + 2.0 * x * x)
    yd = y * radial + d.p1 * (r2 + 2.0 * y * y) + d.p2 * xy2
    return np.column_stack([xd, yd])


def undistort_normalized(xy_distorted: np.ndarray, d: BrownConrady,
                         iterations: int = 20) -> np.ndarray:
    """Inverse of `apply_brown_conrady` by fixed-point iteration (as cv2.undistortPoints does).

    Converges for the moderate distortions of camera lenses; more iterations for strong ones.
    """
    p = _as_points(xy_distorted, 2, "xy_distorted")
    if d.is_zero:
        return p.copy()
    xd, yd = p[:, 0], p[:, 1]
    x, y = xd.copy(), yd.copy()
    for _ in range(iterations):
        r2 = x * x + y * y
        radial = 1.0 + r2 * (d.k1 + r2 * (d.k2 + r2 * d.k3))
        dx = 2.0 * d.p1 * x * y + d.p2 * (r2 + 2.0 * x * x)
        dy = d.p1 * (r2 + 2.0 * y * y) + 2.0 * d.p2 * x * y
        x = (xd - dx) / radial
        y = (yd - dy) / radial
    return np.column_stack([x, y])


def defect_displacement(pixels: np.ndarray, defects: tuple[LocalDefect, ...]) -> np.ndarray:
    """Sum of the local-defect displacement bumps (N, 2) px at pixel positions (N, 2)."""
    p = _as_points(pixels, 2, "pixels")
    out = np.zeros_like(p)
    for df in defects:
        d2 = (p[:, 0] - df.x_px) ** 2 + (p[:, 1] - df.y_px) ** 2
        g = df.amplitude_px * np.exp(-d2 / (2.0 * df.sigma_px ** 2))
        a = math.radians(df.direction_deg)
        out[:, 0] += g * math.cos(a)
        out[:, 1] += g * math.sin(a)
    return out


def project(geom: CameraGeometry, directions_cam: np.ndarray, *,
            include_defects: bool = True) -> np.ndarray:
    """Camera-frame directions (N, 3) -> pixel positions (N, 2) as (x, y) = (column, row).

    The optical axis lands on the principal point, by default the detector's geometric centre
    ((W - 1) / 2, (H - 1) / 2); one degree of azimuth moves a rectilinear image by f tan(1 deg)
    / pitch (here 25 mm / 17 um: 25.67 px), towards lower columns for a positive azimuth.

    >>> geom = CameraGeometry(640, 512, 17.0, 25.0)
    >>> project(geom, np.array([[0.0, 0.0, 1.0]])).tolist()
    [[319.5, 255.5]]
    >>> project(geom, to_camera_frame(np.array([[0.0, 0.0, 1.0]]), 1.0, 0.0)).round(3).tolist()
    [[293.831, 255.5]]
    """
    xy = ideal_normalized(geom, directions_cam)
    if not geom.distortion.is_zero:
        xy = apply_brown_conrady(xy, geom.distortion)
    cx, cy = geom.principal_point
    fx, fy = geom.fx, geom.fy
    t = math.tan(math.radians(geom.skew_deg))
    u = fx * (xy[:, 0] + t * xy[:, 1]) + cx
    v = fy * xy[:, 1] + cy
    px = np.column_stack([u, v])
    if include_defects and geom.defects:
        px = px + defect_displacement(px, geom.defects)
    return px


def project_target(geom: CameraGeometry, points_mm: np.ndarray, collimator_focal_mm: float,
                   az_deg: float = 0.0, el_deg: float = 0.0) -> np.ndarray:
    """Target plate points (N, 2) mm -> pixel positions (N, 2) (x, y) at the given stage angles."""
    d = collimator_directions(points_mm, collimator_focal_mm)
    return project(geom, to_camera_frame(d, az_deg, el_deg))
