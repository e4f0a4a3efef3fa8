"""Boresight: where the UUT looks, from one image of the on-axis pinhole.

Method (common practice on collimator benches): a single pinhole on the collimator axis is imaged
by the UUT; its centroid (sub-pixel, with its uncertainty: `analysis.centroid`) is compared with a
reference pixel, by default the detector's geometric centre ``((W-1)/2, (H-1)/2)``. The angular
boresight error is not the pixel offset times the IFOV: it is the stage pose (az, el) at which the
reference pixel would look along the collimator axis, found through the UUT's model and the
az-over-el gimbal (`analysis.alignment.aligned_pose`). That pose, measured from the mount's zero,
is the boresight relative to the mount; its magnitude ``acos(cos az cos el)`` is the boresight
error, judged against ``max_boresight_error_mrad``. Uncertainties are propagated from the
centroid's (GUM, JCGM 100:2008).

Repeated measurements (several blackbody temperatures, a re-mount) give the boresight shift: the
largest angular distance between any two of them (judged against ``max_boresight_shift_mrad``)
and the spread (sample standard deviation about the mean, per axis).

Axis order: pixels (x, y) = (column, row); poses and boresight (az, el).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from analysis.alignment import aligned_pose_with_uncertainty, axis_direction_at
from analysis.centroid import Spot, SpotFlag, centroid_at, detect_spots
from analysis.geometry import CameraGeometry, project
from analysis.verdicts import SpecKey, Verdict

__all__ = ["BORESIGHT_SPEC_KEYS", "BoresightMeasurement", "BoresightShift", "find_pinhole",
           "boresight_from_spot", "boresight_from_model", "measure_boresight", "boresight_shift",
           "angle_between_poses_mrad",
           "boresight_verdicts", "PinholeNotFound"]

BORESIGHT_SPEC_KEYS: Mapping[str, SpecKey] = {
    "max_boresight_error_mrad": SpecKey(
        "max_boresight_error_mrad", "boresight error", "mrad", "max",
        "angle between the line of sight through the reference pixel and the collimator axis "
        "at the mount's zero pose"),
    "max_boresight_shift_mrad": SpecKey(
        "max_boresight_shift_mrad", "boresight shift", "mrad", "max",
        "largest angle between any two boresight measurements of the set (temperatures, "
        "re-mounts)"),
}


class PinholeNotFound(ValueError):
    """No usable single pinhole image in the frame; the message says what was seen."""


@dataclass(frozen=True)
class BoresightMeasurement:
    """One boresight measurement.

    ``spot_px`` and ``spot_sigma_px``: the pinhole centroid (x, y) and its 1-sigma; ``offset_px``
    = spot - reference; ``pose_deg``: the stage (az, el) when the frame was taken;
    ``boresight_deg`` (az, el) and ``sigma_deg``: the pose at which the reference pixel looks
    along the collimator axis (the boresight relative to the mount).
    """

    spot_px: tuple[float, float]
    spot_sigma_px: tuple[float, float]
    reference_px: tuple[float, float]
    pose_deg: tuple[float, float]
    boresight_deg: tuple[float, float]
    sigma_deg: tuple[float, float]
    snr: float = float("nan")
    label: str = ""

    @property
    def offset_px(self) -> tuple[float, float]:
        return (self.spot_px[0] - self.reference_px[0], self.spot_px[1] - self.reference_px[1])

    @property
    def boresight_mrad(self) -> tuple[float, float]:
        return (math.radians(self.boresight_deg[0]) * 1000.0,
                math.radians(self.boresight_deg[1]) * 1000.0)

    @property
    def sigma_mrad(self) -> tuple[float, float]:
        return (math.radians(self.sigma_deg[0]) * 1000.0, math.radians(self.sigma_deg[1]) * 1000.0)

    @property
    def error_mrad(self) -> float:
        """``acos(cos az cos el)``: the angle of the line of sight from the axis at zero pose."""
        return angle_between_poses_mrad((0.0, 0.0), self.boresight_deg)

    @property
    def error_sigma_mrad(self) -> float:
        """1-sigma of `error_mrad` (first order; near zero the quadrature sum of the axes)."""
        a, e = self.boresight_mrad
        sa, se = self.sigma_mrad
        r = math.hypot(a, e)
        if r < math.hypot(sa, se):
            return math.hypot(sa, se) / math.sqrt(2.0)
        return math.hypot(a * sa, e * se) / r

    def to_dict(self) -> dict[str, Any]:
        return {"label": self.label, "spot_px": list(self.spot_px),
                "spot_sigma_px": list(self.spot_sigma_px), "reference_px": list(self.reference_px),
                "offset_px": list(self.offset_px), "pose_deg": list(self.pose_deg),
                "boresight_deg": list(self.boresight_deg), "sigma_deg": list(self.sigma_deg),
                "boresight_mrad": list(self.boresight_mrad), "sigma_mrad": list(self.sigma_mrad),
                "error_mrad": self.error_mrad, "error_sigma_mrad": self.error_sigma_mrad,
                "snr": self.snr}


def angle_between_poses_mrad(a_deg: Sequence[float], b_deg: Sequence[float]) -> float:
    """Angle (mrad) between the lines of sight of two az-over-el gimbal poses (exact)."""
    da = axis_direction_at(float(a_deg[0]), float(a_deg[1]))
    db = axis_direction_at(float(b_deg[0]), float(b_deg[1]))
    # atan2 of |cross| and dot keeps full precision for tiny angles (acos does not).
    return 1000.0 * math.atan2(float(np.linalg.norm(np.cross(da, db))), float(da @ db))


def find_pinhole(image: np.ndarray, *, saturation: float | None = None,
                 threshold_sigma: float = 8.0, window_px: int = 7, method: str = "gauss") -> Spot:
    """The single pinhole's spot in a frame ([row, col]); `PinholeNotFound` when there is none,
    several, or only a flagged one (saturated, truncated at the frame edge, merged).

    Detection with `detect_spots`; the centroid by default a pixel-integrated Gaussian fit
    (Winick 1986), unbiased at every sub-pixel phase where the windowed centre of mass is not.
    """
    spots = detect_spots(image, threshold_sigma=threshold_sigma, window_px=window_px,
                         method=method, saturation=saturation)
    if not spots:
        raise PinholeNotFound(
            f"no pinhole image above {threshold_sigma:g} sigma of the background; is the single "
            "pinhole in the beam, the blackbody above the plate, and the spot inside the field?")
    spots.sort(key=lambda s: s.flux, reverse=True)
    if len(spots) > 1 and spots[1].flux > 0.2 * spots[0].flux:
        raise PinholeNotFound(f"{len(spots)} spots in the frame where one pinhole was expected; "
                              "is a grid in the beam instead of the single pinhole?")
    # Re-measure without the isolated-pixel repair: on a sharp (undersampled) pinhole image the
    # repair takes the peak pixel for a hot one and biases the centroid by up to 0.1 px.
    spot = centroid_at(image, spots[0].x, spots[0].y, window_px, search_px=2, method=method,
                       saturation=saturation, repair_bad_pixels=False)
    serious = SpotFlag.SATURATED | SpotFlag.TRUNCATED | SpotFlag.MERGED
    if spot.flags & serious:
        raise PinholeNotFound(f"the pinhole image at ({spot.x:.1f}, {spot.y:.1f}) px is flagged "
                              f"{spot.flags}; lower the blackbody difference or bring the spot "
                              "away from the frame edge")
    return spot


def boresight_from_spot(spot_px: Sequence[float], spot_sigma_px: Sequence[float],
                        geom: CameraGeometry, pose_deg: Sequence[float] = (0.0, 0.0), *,
                        reference_px: Sequence[float] | None = None, stage_sigma_deg: float = 0.0,
                        model_scale_sigma_rel: float = 0.0, model_roll_sigma_deg: float = 0.0,
                        snr: float = float("nan"), label: str = "") -> BoresightMeasurement:
    """Boresight from a centroid already measured (x, y) px at stage pose (az, el) deg.

    `reference_px` defaults to the detector's geometric centre (not the model's principal point:
    the boresight is where the *detector* looks). `model_scale_sigma_rel` and
    `model_roll_sigma_deg` are the model's own uncertainties (a data sheet's focal length and the
    mounting's roll): they scale and turn the correction from the pose to the boresight, so they
    matter only when the spot is far from the reference pixel.

    >>> g = CameraGeometry(640, 512, 17.0, 25.0)
    >>> m = boresight_from_spot((319.5 + 10.0, 255.5), (0.05, 0.05), g)
    >>> round(m.boresight_mrad[0], 3), round(m.boresight_mrad[1], 3)   # atan(10 * 0.017 / 25)
    (6.8, 0.0)
    """
    ref = ((geom.width - 1) / 2.0, (geom.height - 1) / 2.0) if reference_px is None else (
        float(reference_px[0]), float(reference_px[1]))
    pose = (float(pose_deg[0]), float(pose_deg[1]))
    (az, el), (saz, sel) = aligned_pose_with_uncertainty(
        spot_px, spot_sigma_px, ref, pose, geom, stage_sigma_deg=stage_sigma_deg,
        model_scale_sigma_rel=model_scale_sigma_rel, model_roll_sigma_deg=model_roll_sigma_deg)
    return BoresightMeasurement((float(spot_px[0]), float(spot_px[1])),
                                (float(spot_sigma_px[0]), float(spot_sigma_px[1])), ref, pose,
                                (az, el), (saz, sel), snr, label)


def boresight_from_model(geom: CameraGeometry, principal_point_sigma_px: Sequence[float],
                         pose_deg: Sequence[float] = (0.0, 0.0), *,
                         reference_px: Sequence[float] | None = None,
                         label: str = "") -> BoresightMeasurement:
    """Boresight from a camera model fitted at stage pose `pose_deg` (a pinhole grid at one pose,
    or a pinhole scan with the pose of its origin): where the fitted model puts the collimator
    axis, converted through that same model. The principal point's sigmas stand for the spot's
    (the fit places the axis through them).

    >>> g = CameraGeometry(640, 512, 17.0, 25.0, cx=329.5, cy=255.5)
    >>> round(boresight_from_model(g, (0.01, 0.01)).boresight_mrad[0], 3)
    6.8
    """
    axis = axis_direction_at(float(pose_deg[0]), float(pose_deg[1]))[None, :]
    spot = project(geom, axis, include_defects=False)[0]
    return boresight_from_spot(spot, principal_point_sigma_px, geom, pose_deg,
                               reference_px=reference_px, label=label)


def measure_boresight(image: np.ndarray, geom: CameraGeometry,
                      pose_deg: Sequence[float] = (0.0, 0.0), *,
                      reference_px: Sequence[float] | None = None,
                      saturation: float | None = None, stage_sigma_deg: float = 0.0,
                      model_scale_sigma_rel: float = 0.0, model_roll_sigma_deg: float = 0.0,
                      label: str = "") -> BoresightMeasurement:
    """Find the pinhole in `image` ([row, col]) and turn it into a boresight (see module)."""
    spot = find_pinhole(image, saturation=saturation)
    return boresight_from_spot((spot.x, spot.y), (spot.sigma_x, spot.sigma_y), geom, pose_deg,
                               reference_px=reference_px, stage_sigma_deg=stage_sigma_deg,
                               model_scale_sigma_rel=model_scale_sigma_rel,
                               model_roll_sigma_deg=model_roll_sigma_deg, snr=spot.snr,
                               label=label)


@dataclass(frozen=True)
class BoresightShift:
    """How much the boresight moves between measurements.

    ``max_shift_mrad``: the largest angle between two measurements (``pair``: their indices),
    ``sigma_mrad`` its 1-sigma from theirs; ``mean_deg`` and ``spread_mrad`` (az, el): the mean
    boresight and the sample standard deviation about it.
    """

    max_shift_mrad: float
    sigma_mrad: float
    pair: tuple[int, int]
    mean_deg: tuple[float, float]
    spread_mrad: tuple[float, float]
    count: int

    def to_dict(self) -> dict[str, Any]:
        return {"max_shift_mrad": self.max_shift_mrad, "sigma_mrad": self.sigma_mrad,
                "pair": list(self.pair), "mean_deg": list(self.mean_deg),
                "spread_mrad": list(self.spread_mrad), "count": self.count}


def boresight_shift(measurements: Sequence[BoresightMeasurement]) -> BoresightShift:
    """Largest pairwise shift and spread of two or more boresight measurements.

    >>> g = CameraGeometry(640, 512, 17.0, 25.0)
    >>> a = boresight_from_spot((319.5, 255.5), (0.05, 0.05), g)
    >>> b = boresight_from_spot((322.5, 259.5), (0.05, 0.05), g)
    >>> round(boresight_shift([a, b]).max_shift_mrad, 2)    # 5 px x 0.68 mrad
    3.4
    """
    if len(measurements) < 2:
        raise ValueError("a boresight shift needs at least two measurements")
    best, pair, sigma = -1.0, (0, 1), float("nan")
    for i, j in itertools.combinations(range(len(measurements)), 2):
        a, b = measurements[i], measurements[j]
        shift = angle_between_poses_mrad(a.boresight_deg, b.boresight_deg)
        if shift > best:
            da = np.subtract(b.boresight_mrad, a.boresight_mrad)
            var = np.add(np.square(a.sigma_mrad), np.square(b.sigma_mrad))
            norm = float(np.hypot(*da))
            s = (math.sqrt(float(da ** 2 @ var)) / norm if norm > math.sqrt(var.sum())
                 else math.sqrt(float(var.sum()) / 2.0))
            best, pair, sigma = shift, (i, j), s
    arr = np.array([m.boresight_deg for m in measurements])
    spread = np.radians(arr.std(axis=0, ddof=1)) * 1000.0
    mean = arr.mean(axis=0)
    return BoresightShift(best, sigma, pair, (float(mean[0]), float(mean[1])),
                          (float(spread[0]), float(spread[1])), len(measurements))


def boresight_verdicts(limits: Mapping[str, float], measurement: BoresightMeasurement | None,
                       shift: BoresightShift | None = None,
                       conditions: Mapping[str, Any] | None = None) -> tuple[Verdict, ...]:
    """Verdicts for the boresight spec keys present in `limits` (others are ignored)."""
    out = []
    key = "max_boresight_error_mrad"
    if key in limits and measurement is not None:
        out.append(BORESIGHT_SPEC_KEYS[key].judge(measurement.error_mrad,
                                                  measurement.error_sigma_mrad,
                                                  float(limits[key]), conditions))
    key = "max_boresight_shift_mrad"
    if key in limits and shift is not None:
        out.append(BORESIGHT_SPEC_KEYS[key].judge(shift.max_shift_mrad, shift.sigma_mrad,
                                                  float(limits[key]),
                                                  {**(conditions or {}),
                                                   "measurements": shift.count}))
    return tuple(out)
