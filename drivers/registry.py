"""Driver registry: drivers are found by name through the `nightbench.drivers` entry points.

A new instrument model is one module plus one line in a package's pyproject:

    [project.entry-points."nightbench.drivers"]
    scpi-blackbody = "drivers.blackbody_scpi:ScpiBlackbody"

Every driver class takes `(transport, *, name, settings)` and has `KIND` and `SETTINGS`.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from importlib.metadata import EntryPoint, entry_points
from typing import Any

GROUP = "nightbench.drivers"


class UnknownDriverError(KeyError):
    """No driver of that name; the message lists the known ones."""

    def __str__(self) -> str:
        return str(self.args[0]) if self.args else ""


@dataclass(frozen=True)
class DriverInfo:
    """What `nightbench drivers` shows: name, instrument kind, providing package, settings."""

    name: str
    kind: str
    package: str
    settings: Mapping[str, str]


def _entry_points() -> dict[str, EntryPoint]:
    return {ep.name: ep for ep in entry_points(group=GROUP)}


def find_driver(name: str) -> Any:
    """The driver class registered under `name`."""
    eps = _entry_points()
    if name not in eps:
        known = ", ".join(sorted(eps)) or "none (is nightbench installed? pip install -e .)"
        raise UnknownDriverError(f"no driver named {name!r}; known drivers: {known}")
    return eps[name].load()


def list_drivers() -> list[DriverInfo]:
    """Every registered driver, sorted by name. A driver that fails to import is listed with
    kind 'broken' and the error as its only setting, so one bad plug-in hides nothing else."""
    out = []
    for name, ep in sorted(_entry_points().items()):
        package = ep.dist.name if ep.dist is not None else ep.value.split(":")[0]
        try:
            cls = ep.load()
        except Exception as exc:  # a broken plug-in must not hide the others
            out.append(DriverInfo(name, "broken", package, {"error": f"{type(exc).__name__}: {exc}"}))
            continue
        kind = getattr(cls, "KIND", "") or getattr(cls, "kind", "unknown")
        out.append(DriverInfo(name, kind, package, dict(getattr(cls, "SETTINGS", {}))))
    return out
