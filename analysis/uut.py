"""What the analysis may assume about the camera under test (the UUT file's content).

This is the *nominal* camera, as its data sheet states it. The simulated camera's actual
distortion, noise and defects live elsewhere (simulators.camera_truth) and never reach analysis.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from analysis.geometry import PROJECTIONS, CameraGeometry


@dataclass(frozen=True)
class UutSpec:
    """Nominal UUT description plus its pass/fail limits per measurement."""

    model: str
    serial: str
    width: int
    height: int
    pixel_pitch_um: float
    focal_length_mm: float
    f_number: float
    projection: str
    band_um: tuple[float, float]
    frame_rate_hz: float
    bit_depth: int
    spec_limits: dict[str, float] = field(default_factory=dict)
    spec_conditions: dict[str, dict[str, float]] = field(default_factory=dict)
    """Per spec key, the measurement conditions the UUT file states beside its limit
    (``netd_mk: {limit: 50, source_c: 30, background_c: 20}``)."""
    reference_px: tuple[float, float] | None = None
    """The boresight's reference pixel (x, y) if the UUT file states one; None: the detector's
    geometric centre."""

    def __post_init__(self) -> None:
        if self.projection not in PROJECTIONS:
            raise ValueError(f"projection {self.projection!r} unknown; use one of {PROJECTIONS}")

    def nominal_geometry(self) -> CameraGeometry:
        """The ideal camera: nominal focal length, centred principal point, no distortion.

        >>> uut = UutSpec("cam", "SN1", 640, 512, 17.0, 25.0, 1.0, "rectilinear", (8.0, 12.0),
        ...               30.0, 14)
        >>> uut.nominal_geometry().principal_point
        (319.5, 255.5)
        """
        return CameraGeometry(width=self.width, height=self.height,
                              pixel_pitch_um=self.pixel_pitch_um,
                              focal_length_mm=self.focal_length_mm, projection=self.projection)

    @property
    def full_scale_counts(self) -> int:
        return 2 ** self.bit_depth - 1

    def to_json_dict(self) -> dict[str, object]:
        return {"model": self.model, "serial": self.serial, "width": self.width,
                "height": self.height, "pixel_pitch_um": self.pixel_pitch_um,
                "focal_length_mm": self.focal_length_mm, "f_number": self.f_number,
                "projection": self.projection, "band_um": list(self.band_um),
                "frame_rate_hz": self.frame_rate_hz, "bit_depth": self.bit_depth,
                "spec_limits": dict(self.spec_limits),
                "spec_conditions": {k: dict(v) for k, v in self.spec_conditions.items()},
                **({"reference_px": list(self.reference_px)} if self.reference_px else {})}
