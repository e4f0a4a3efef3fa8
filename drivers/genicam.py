"""Optional frame grabber for GenICam cameras (GigE Vision, USB3 Vision) through `harvesters`.

An extra: nightbench does not depend on harvesters. The package is imported only when this driver
opens; without it the driver says what to install. A GenTL producer (`.cti` file from the
camera or frame-grabber maker) is needed as well. Station entry::

    camera:
      driver: genicam-harvesters
      resource: genicam:0                  # index in the device list, or genicam:<serial number>
      producer: /opt/gentl/lib/producer.cti
      frame_rate: 30                       # optional: AcquisitionFrameRate when the camera has it
      timeout_s: 2

Counters are the frame ids the transport layer stamps on each buffer (so a dropped frame shows
as a gap); timestamps are the camera's (tick units converted with `tick_hz`, default 1 GHz).
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

import numpy as np

from drivers.errors import InstrumentConnectionError, InstrumentTimeout
from drivers.interfaces import Frame, FrameGrabber
from drivers.scpi import SettingsError


def require_harvesters(instrument: str) -> Any:
    """`harvesters.core.Harvester`, or a clear message saying how to get it."""
    try:
        from harvesters.core import Harvester
    except ImportError:
        raise InstrumentConnectionError(
            instrument, "the genicam-harvesters driver needs the optional 'harvesters' package, "
            "which is not installed",
            hint="pip install harvesters, and install your camera maker's GenTL producer (.cti)"
        ) from None
    return Harvester


class GenicamGrabber(FrameGrabber):
    """Frames from a GenICam camera through a GenTL producer."""

    KIND = "camera"
    SETTINGS = {
        "resource": "genicam:<index> or genicam:<serial number>",
        "producer": "path of the GenTL producer (.cti) file",
        "frame_rate": "frames per second to request (optional)",
        "bit_depth": "bits per pixel (default 16)",
        "timeout_s": "seconds to wait for a buffer (default 2)",
        "tick_hz": "camera timestamp ticks per second (default 1e9)",
    }

    def __init__(self, transport: None = None, *, name: str = "camera",
                 settings: Mapping[str, Any] | None = None) -> None:
        settings = dict(settings or {})
        problems = self.validate_settings(settings)
        if problems:
            raise SettingsError(f"{name}: " + "; ".join(problems))
        self.name = name
        harvester_cls = require_harvesters(name)
        producer = Path(str(settings["producer"]))
        if not producer.is_absolute() and settings.get("base_dir") is not None:
            producer = Path(settings["base_dir"]) / producer
        if not producer.is_file():
            raise InstrumentConnectionError(name, f"GenTL producer {producer} not found",
                                            hint="install the camera maker's GenTL producer")
        self._h = harvester_cls()
        self._h.add_file(str(producer))
        self._h.update()
        which = str(settings["resource"]).strip()[len("genicam:"):]
        selector: dict[str, Any] = ({"list_index": int(which)} if which.isdigit()
                                    else {"search_key": {"serial_number": which}})
        try:
            self._ia = self._h.create(**selector) if hasattr(self._h, "create") else \
                self._h.create_image_acquirer(**selector)
        except (IndexError, ValueError) as exc:
            self._h.reset()
            raise InstrumentConnectionError(name, f"no GenICam device {which!r} ({exc})",
                                            hint="check the camera is connected and powered")
        self._timeout = float(settings.get("timeout_s", 2.0))
        self._tick_hz = float(settings.get("tick_hz", 1e9))
        self._bit_depth = int(settings.get("bit_depth", 16))
        nodes = self._ia.remote_device.node_map
        if settings.get("frame_rate") is not None and hasattr(nodes, "AcquisitionFrameRate"):
            nodes.AcquisitionFrameRate.value = float(settings["frame_rate"])
        self._rate = float(getattr(getattr(nodes, "AcquisitionFrameRate", None), "value", 0.0)
                           or settings.get("frame_rate") or 30.0)
        self._shape = (int(nodes.Height.value), int(nodes.Width.value))
        self._ident = " ".join(str(getattr(getattr(nodes, key, None), "value", ""))
                               for key in ("DeviceVendorName", "DeviceModelName",
                                           "DeviceSerialNumber")).strip()
        self._ia.start()

    @classmethod
    def validate_settings(cls, settings: Mapping[str, Any]) -> list[str]:
        problems = []
        if not str(settings.get("resource", "")).startswith("genicam:"):
            problems.append("resource: must be genicam:<index> or genicam:<serial number>")
        if not settings.get("producer"):
            problems.append("producer: missing; the path of the GenTL producer (.cti)")
        return problems

    def identify(self) -> str:
        return self._ident or "GenICam camera"

    def grab(self, count: int) -> Iterator[Frame]:
        for _ in range(int(count)):
            try:
                buffer = self._ia.fetch(timeout=self._timeout)
            except Exception as exc:  # harvesters raises its own timeout type per version
                raise InstrumentTimeout(self.name, f"no frame within {self._timeout:g} s "
                                        f"({type(exc).__name__})") from None
            with buffer:
                component = buffer.payload.components[0]
                data = np.array(component.data, copy=True).reshape(component.height,
                                                                     component.width)
                yield Frame(data=data, counter=int(buffer.frame_id),
                            timestamp=float(buffer.timestamp) / self._tick_hz, meta={})

    def close(self) -> None:
        ia, self._ia = getattr(self, "_ia", None), None
        if ia is not None:
            ia.stop()
            ia.destroy()
        h = getattr(self, "_h", None)
        if h is not None:
            h.reset()
