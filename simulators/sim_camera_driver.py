"""The simulated camera as a registered driver: built like every other camera driver.

Every driver is built as ``cls(transport, *, name, settings)``. The simulated camera renders
whatever the simulated bench shows, so the station hands it, inside ``settings``, the objects a
real camera would find on its cable: ``renderer`` (simulators.camera_render.CameraRenderer),
``scene`` (a callable giving the SceneState now), ``clock`` and ``frame_rate_hz``, and optionally
``faults`` (a FaultPlan). Its station-file settings are only ``resource: sim``.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from simulators.camera_grabber import SimFrameGrabber

__all__ = ["SimCameraDriver", "RUNTIME_KEYS"]

RUNTIME_KEYS = ("renderer", "scene", "clock", "frame_rate_hz", "faults")
"""Settings the station adds at run time (never written in a station file)."""


class SimCameraDriver(SimFrameGrabber):
    """SimFrameGrabber behind the common driver constructor."""

    KIND = "camera"
    SETTINGS = {"resource": "'sim': rendered from the simulated bench (simulated stations only)"}

    def __init__(self, transport: None = None, *, name: str = "camera",
                 settings: Mapping[str, Any]) -> None:
        missing = [k for k in RUNTIME_KEYS[:4] if k not in settings]
        if missing:
            raise ValueError(f"{name}: the simulated camera is built by the station for a "
                             f"simulated bench (missing {', '.join(missing)}); use resource: "
                             "sim in a station file with a simulation section")
        super().__init__(settings["renderer"], settings["scene"], settings["clock"],
                         frame_rate_hz=float(settings["frame_rate_hz"]), name=name,
                         faults=settings.get("faults"))

    @classmethod
    def validate_settings(cls, settings: Mapping[str, Any]) -> list[str]:
        """Only ``resource: sim`` belongs in a station file."""
        problems = []
        if settings.get("resource") not in (None, "sim"):
            problems.append(f"resource: the simulated camera's resource is 'sim', not "
                            f"{settings.get('resource')!r}")
        for key in settings:
            if key not in ("resource", "base_dir"):
                problems.append(f"{key}: not a setting of the simulated camera (it takes "
                                "resource: sim only)")
        return problems
