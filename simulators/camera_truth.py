"""The simulated UUT as it really is: actual geometry, blur, radiometry, noise and defects.

Kept apart from the UUT file (what the analysis may assume) so analysis never sees the truth;
tests compare analysis results with it.

Signal model (per pixel, counts)::

    mean  = offset_counts + offset_fpn + R * gain * L_scene         R = responsivity (counts per
    noise ~ N(0, sigma_t^2) per frame, sigma_t = netd_k * R * dL/dT    W m^-2 sr^-1), gain ~ 1 +
                                                                        gain_fpn_rel * N(0, 1)
so the temporal NETD equals `netd_k` at `netd_reference_c` (NETD = temporal noise / SiTF,
SiTF = R dL/dT).

Optics: the point-spread function is diffraction by a circular aperture at `f_number` over the
band, convolved with a Gaussian aberration blur, then integrated over the square pixel. Its
transfer function is closed-form (`system_mtf`, from `analysis.optics`). `blur_sigma_px` is the
Gaussian-equivalent sigma of the whole optical spot (diffraction plus aberrations, before the
pixel); the aberration part is ``sqrt(blur^2 - s_diff^2)`` with ``s_diff = 0.42 N lambda`` the
Gaussian equivalent of the Airy spot. Pinhole spots are rendered as that Gaussian (the same spot
width, exact centroid), the slanted edge through the exact transfer function.

Mounting error: the UUT's line of sight is tilted from the mount's zero by (`az_mrad`, `el_mrad`)
and the UUT is rolled about it by `roll_mrad` (`MountingError`; zero by default).

Bad pixels, placed from the truth's own `seed`: dead (read 0), hot (read full scale), noisy
(temporal noise x `noisy_factor`) and non-responsive (gain x `unresponsive_gain`, offset normal).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from analysis.geometry import BrownConrady, CameraGeometry, LocalDefect
from analysis.optics import SystemMtf, airy_gaussian_sigma_um
from analysis.radiometry import band_radiance_derivative, celsius_to_kelvin


@dataclass(frozen=True)
class MountingError:
    """How the UUT sits on the mount: line of sight tilted by `az_mrad` (toward +x, image right)
    and `el_mrad` (up, toward -y) from the mount's zero, and rolled by `roll_mrad` about it (from
    +x toward +y). Same sign conventions as the gimbal (analysis.geometry)."""

    az_mrad: float = 0.0
    el_mrad: float = 0.0
    roll_mrad: float = 0.0

    @property
    def is_zero(self) -> bool:
        return not any((self.az_mrad, self.el_mrad, self.roll_mrad))


@dataclass(frozen=True)
class CameraTruth:
    """All parameters of the simulated camera; frozen so it can key caches."""

    geometry: CameraGeometry
    model: str = "simulated camera"
    band_um: tuple[float, float] = (8.0, 12.0)
    blur_sigma_px: float = 0.6
    f_number: float = 1.0
    mounting: MountingError = MountingError()
    responsivity_counts_per_radiance: float = 200.0
    offset_counts: float = 2000.0
    netd_k: float = 0.05
    netd_reference_c: float = 30.0
    gain_fpn_rel: float = 0.01
    offset_fpn_counts: float = 20.0
    dead_fraction: float = 0.0
    hot_fraction: float = 0.0
    noisy_fraction: float = 0.0
    noisy_factor: float = 5.0
    unresponsive_fraction: float = 0.0
    unresponsive_gain: float = 0.2
    bit_depth: int = 14
    seed: int = 0

    def __post_init__(self) -> None:
        problems = []
        if not self.blur_sigma_px > 0:
            problems.append("blur_sigma_px: must be > 0 (Gaussian blur spot, px)")
        if not self.responsivity_counts_per_radiance > 0:
            problems.append("responsivity_counts_per_radiance: must be > 0")
        if not self.netd_k >= 0:
            problems.append("netd_k: must be >= 0")
        lo, hi = self.band_um
        if not 0 < lo < hi < math.inf:
            problems.append(f"band_um: {list(self.band_um)} must be a finite band lo < hi with "
                            "lo > 0 (the optics' diffraction depends on it)")
        elif not self.f_number > 0:
            problems.append("f_number: must be > 0")
        elif self.blur_sigma_px > 0 and self.blur_sigma_px < self.diffraction_sigma_px:
            problems.append(f"blur_sigma_px: {self.blur_sigma_px} px is below the diffraction "
                            f"spot's own {self.diffraction_sigma_px:.3f} px at f/{self.f_number} "
                            "(the spot cannot be sharper than diffraction)")
        if not 0.0 <= self.unresponsive_gain < 0.5:
            problems.append("unresponsive_gain: must be in [0, 0.5)")
        for name in ("dead_fraction", "hot_fraction", "noisy_fraction", "unresponsive_fraction"):
            v = getattr(self, name)
            if not 0.0 <= v < 0.5:
                problems.append(f"{name}: must be in [0, 0.5), got {v}")
        if (self.dead_fraction + self.hot_fraction + self.noisy_fraction
                + self.unresponsive_fraction) >= 1.0:
            problems.append("dead + hot + noisy + unresponsive fractions must sum below 1")
        if not 1 <= int(self.bit_depth) <= 16:
            problems.append(f"bit_depth: must be 1..16 (frames are uint16), got {self.bit_depth}")
        if not self.noisy_factor >= 1:
            problems.append("noisy_factor: must be >= 1")
        if problems:
            raise ValueError("CameraTruth: " + "; ".join(problems))

    @property
    def diffraction_sigma_px(self) -> float:
        """Gaussian-equivalent sigma of the diffraction spot, pixels (0.42 N lambda)."""
        return airy_gaussian_sigma_um(self.band_um, self.f_number) / self.geometry.pixel_pitch_um

    @property
    def aberration_sigma_px(self) -> float:
        """The Gaussian aberration blur: the part of `blur_sigma_px` that is not diffraction."""
        return math.sqrt(max(self.blur_sigma_px ** 2 - self.diffraction_sigma_px ** 2, 0.0))

    @property
    def system_mtf(self) -> SystemMtf:
        """The camera's true MTF at any frequency (cycles/px, direction): diffraction x Gaussian
        aberration blur x pixel aperture, each in closed form."""
        return SystemMtf(f_number=self.f_number, band_um=self.band_um,
                         pixel_pitch_um=self.geometry.pixel_pitch_um,
                         blur_sigma_px=self.aberration_sigma_px)

    @property
    def full_scale(self) -> int:
        return 2 ** int(self.bit_depth) - 1

    def sitf_counts_per_k(self, temperature_c: float | None = None) -> float:
        """Signal transfer: counts per kelvin of source temperature, R * dL/dT (unit gain)."""
        t = self.netd_reference_c if temperature_c is None else temperature_c
        return self.responsivity_counts_per_radiance * float(
            band_radiance_derivative(celsius_to_kelvin(t), self.band_um))

    @property
    def temporal_noise_counts(self) -> float:
        """sigma_t = NETD * SiTF at the reference temperature (before ADC quantization)."""
        return self.netd_k * self.sitf_counts_per_k()

    def to_json_dict(self) -> dict[str, Any]:
        g = self.geometry
        cx, cy = g.principal_point
        return {
            "model": self.model, "band_um": list(self.band_um),
            "geometry": {
                "width": g.width, "height": g.height, "pixel_pitch_um": g.pixel_pitch_um,
                "focal_length_mm": g.focal_length_mm, "projection": g.projection,
                "cx": cx, "cy": cy, "aspect": g.aspect, "skew_deg": g.skew_deg,
                "roll_deg": g.roll_deg,
                "distortion": {"k1": g.distortion.k1, "k2": g.distortion.k2,
                               "p1": g.distortion.p1, "p2": g.distortion.p2,
                               "k3": g.distortion.k3},
                "defects": [{"x_px": d.x_px, "y_px": d.y_px, "amplitude_px": d.amplitude_px,
                             "sigma_px": d.sigma_px, "direction_deg": d.direction_deg}
                            for d in g.defects],
            },
            "blur_sigma_px": self.blur_sigma_px, "f_number": self.f_number,
            "aberration_sigma_px": self.aberration_sigma_px,
            "system_mtf_at_nyquist": float(self.system_mtf(0.5)),
            "mounting": {"az_mrad": self.mounting.az_mrad, "el_mrad": self.mounting.el_mrad,
                         "roll_mrad": self.mounting.roll_mrad},
            "responsivity_counts_per_radiance": self.responsivity_counts_per_radiance,
            "offset_counts": self.offset_counts, "netd_k": self.netd_k,
            "netd_reference_c": self.netd_reference_c,
            "temporal_noise_counts": self.temporal_noise_counts,
            "gain_fpn_rel": self.gain_fpn_rel, "offset_fpn_counts": self.offset_fpn_counts,
            "dead_fraction": self.dead_fraction, "hot_fraction": self.hot_fraction,
            "noisy_fraction": self.noisy_fraction, "noisy_factor": self.noisy_factor,
            "unresponsive_fraction": self.unresponsive_fraction,
            "unresponsive_gain": self.unresponsive_gain,
            "bit_depth": self.bit_depth, "seed": self.seed,
        }


_GEOMETRY_KEYS = {"width", "height", "pixel_pitch_um", "focal_length_mm", "projection", "cx",
                  "cy", "aspect", "skew_deg", "roll_deg", "distortion", "defects"}
_DIST_KEYS = {"k1", "k2", "p1", "p2", "k3"}
_DEFECT_KEYS = {"x_px", "y_px", "amplitude_px", "sigma_px", "direction_deg"}
_SCALARS = {"blur_sigma_px", "responsivity_counts_per_radiance", "offset_counts", "netd_k",
            "netd_reference_c", "gain_fpn_rel", "offset_fpn_counts", "dead_fraction",
            "hot_fraction", "noisy_fraction", "noisy_factor", "f_number",
            "unresponsive_fraction", "unresponsive_gain"}
_TOP = _SCALARS | {"geometry", "model", "band_um", "bit_depth", "seed", "mounting"}
_MOUNT_KEYS = {"az_mrad", "el_mrad", "roll_mrad"}


def _num(v: Any, key: str, problems: list[str], integer: bool = False) -> Any:
    ok = isinstance(v, int) if integer else isinstance(v, (int, float))
    if isinstance(v, bool) or not ok or not math.isfinite(float(v)):
        problems.append(f"{key}: expected {'a whole number' if integer else 'a number'}, "
                        f"got {v!r}")
        return None
    return int(v) if integer else float(v)


def _unknown(d: dict[str, Any], allowed: set[str], where: str, problems: list[str]) -> None:
    for k in d:
        if k not in allowed:
            problems.append(f"{where}{k}: unknown key; allowed: {', '.join(sorted(allowed))}")


def truth_from_mapping(d: dict[str, Any]) -> CameraTruth:
    """Build a `CameraTruth` from a mapping (YAML); `ValueError` lists every problem found."""
    problems: list[str] = []
    if not isinstance(d, dict):
        raise ValueError(f"camera truth: expected a mapping, got {type(d).__name__}")
    _unknown(d, _TOP, "", problems)
    g = d.get("geometry")
    geometry = None
    if not isinstance(g, dict):
        problems.append("geometry: missing or not a mapping; add width, height, pixel_pitch_um, "
                        "focal_length_mm under 'geometry:'")
    else:
        _unknown(g, _GEOMETRY_KEYS, "geometry.", problems)
        kw: dict[str, Any] = {}
        for key in ("width", "height"):
            kw[key] = _num(g.get(key), f"geometry.{key}", problems, integer=True)
        for key in ("pixel_pitch_um", "focal_length_mm"):
            kw[key] = _num(g.get(key), f"geometry.{key}", problems)
        for key in ("cx", "cy", "aspect", "skew_deg", "roll_deg"):
            if g.get(key) is not None:
                kw[key] = _num(g[key], f"geometry.{key}", problems)
        kw["projection"] = str(g.get("projection", "rectilinear"))
        dist = g.get("distortion") or {}
        if not isinstance(dist, dict):
            problems.append("geometry.distortion: expected a mapping of k1, k2, p1, p2, k3")
            dist = {}
        _unknown(dist, _DIST_KEYS, "geometry.distortion.", problems)
        kw["distortion"] = BrownConrady(**{k: _num(v, f"geometry.distortion.{k}", problems) or 0.0
                                           for k, v in dist.items() if k in _DIST_KEYS})
        defects = []
        raw = g.get("defects") or []
        if not isinstance(raw, list):
            problems.append("geometry.defects: expected a list of mappings")
            raw = []
        for i, item in enumerate(raw):
            where = f"geometry.defects[{i}]."
            if not isinstance(item, dict):
                problems.append(f"geometry.defects[{i}]: expected a mapping of "
                                f"{', '.join(sorted(_DEFECT_KEYS))}")
                continue
            _unknown(item, _DEFECT_KEYS, where, problems)
            vals = {k: _num(item.get(k, 0.0 if k == "direction_deg" else None), where + k,
                            problems) for k in _DEFECT_KEYS}
            if None not in vals.values():
                try:
                    defects.append(LocalDefect(**vals))
                except ValueError as exc:
                    problems.append(f"{where[:-1]}: {exc}")
        kw["defects"] = tuple(defects)
        if None not in kw.values():
            try:
                geometry = CameraGeometry(**kw)
            except ValueError as exc:
                problems.append(f"geometry: {exc}")
    kw2: dict[str, Any] = {}
    for key in _SCALARS:
        if key in d:
            kw2[key] = _num(d[key], key, problems)
    for key in ("bit_depth", "seed"):
        if key in d:
            kw2[key] = _num(d[key], key, problems, integer=True)
    if "model" in d:
        kw2["model"] = str(d["model"])
    if "mounting" in d:
        m = d["mounting"]
        if not isinstance(m, dict):
            problems.append("mounting: expected a mapping of az_mrad, el_mrad, roll_mrad")
        else:
            _unknown(m, _MOUNT_KEYS, "mounting.", problems)
            vals = {k: _num(m[k], f"mounting.{k}", problems) for k in _MOUNT_KEYS if k in m}
            if None not in vals.values():
                kw2["mounting"] = MountingError(**vals)
    if "band_um" in d:
        b = d["band_um"]
        if (isinstance(b, (list, tuple)) and len(b) == 2
                and all(isinstance(x, (int, float)) for x in b) and 0 <= b[0] < b[1]):
            kw2["band_um"] = (float(b[0]), float(b[1]))
        else:
            problems.append(f"band_um: expected [lo, hi] micrometres with lo < hi, got {b!r}")
    if problems or geometry is None:
        raise ValueError("\n".join(problems) or "geometry: invalid")
    try:
        return CameraTruth(geometry=geometry, **kw2)
    except ValueError as exc:
        raise ValueError(str(exc)) from None
