"""Driver registry: drivers are found by name through the `nightbench.drivers` entry points.

A new instrument model is one module plus one line in a package's pyproject:

    [project.entry-points."nightbench.drivers"]
    scpi-blackbody = "drivers.blackbody_scpi:ScpiBlackbody"

Every driver class takes `(transport, *, name, settings)` and has `KIND` and `SETTINGS`.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from importlib.metadata import Distribution, EntryPoint, distributions, entry_points
from typing import Any

GROUP = "nightbench.drivers"


class UnknownDriverError(KeyError):
    """No driver of that name; the message lists the known ones."""

    def __str__(self) -> str:
        return str(self.args[0]) if self.args else ""


class BrokenDriverError(ImportError):
    """A registered driver whose entry point does not load; the message carries the cause."""


@dataclass(frozen=True)
class DriverInfo:
    """What `nightbench drivers` shows: name, instrument kind, providing package, settings."""

    name: str
    kind: str
    package: str
    settings: Mapping[str, str]
    target: str = ""           # the entry point's `module:Class`
    error: str | None = None   # why it does not load (kind is then 'broken')


@dataclass(frozen=True)
class MisspeltGroup:
    """A package that declares drivers under a group that is almost, but not, ours."""

    package: str
    group: str
    names: tuple[str, ...]

    def __str__(self) -> str:
        return (f"package {self.package} declares {', '.join(self.names)} under the entry-point "
                f"group '{self.group}', which nightbench does not read; rename the group to "
                f"'{GROUP}' in its pyproject.toml and reinstall it")


def _entry_points() -> dict[str, EntryPoint]:
    return {ep.name: ep for ep in entry_points(group=GROUP)}


def find_driver(name: str) -> Any:
    """The driver class registered under `name`."""
    eps = _entry_points()
    if name not in eps:
        known = ", ".join(sorted(eps)) or "none (is nightbench installed? pip install -e .)"
        raise UnknownDriverError(f"no driver named {name!r}; known drivers: {known}")
    return _load(eps[name])


def _package(ep: EntryPoint) -> str:
    return ep.dist.name if ep.dist is not None else ep.value.split(":")[0]


def _load(ep: EntryPoint) -> Any:
    try:
        return ep.load()
    except Exception as exc:  # any import-time error of a plug-in, named with its cause
        raise BrokenDriverError(
            f"driver {ep.name!r} ({ep.value}, package {_package(ep)}) cannot be loaded: "
            f"{type(exc).__name__}: {exc}") from exc


def list_drivers() -> list[DriverInfo]:
    """Every registered driver, sorted by name. A driver that fails to import is listed with
    kind 'broken' and its exception as `error`, so one bad plug-in hides nothing else."""
    return [describe(ep) for _, ep in sorted(_entry_points().items())]


def describe(ep: EntryPoint) -> DriverInfo:
    """What one entry point provides, or why it cannot provide it."""
    try:
        cls = _load(ep)
    except BrokenDriverError as exc:
        return DriverInfo(ep.name, "broken", _package(ep), {}, ep.value, str(exc))
    kind = getattr(cls, "KIND", "") or getattr(cls, "kind", "unknown")
    return DriverInfo(ep.name, kind, _package(ep), dict(getattr(cls, "SETTINGS", {})), ep.value)


def driver_info(name: str) -> DriverInfo:
    """One driver's description (`nightbench drivers NAME`); UnknownDriverError lists the rest."""
    eps = _entry_points()
    if name not in eps:
        close = difflib.get_close_matches(name, list(eps), n=1)
        hint = f"did you mean {close[0]!r}? " if close else ""
        raise UnknownDriverError(f"no driver named {name!r}; {hint}known drivers: "
                                 + ", ".join(sorted(eps)))
    return describe(eps[name])


def misspelt_groups(dists: Iterable[Distribution] | None = None) -> list[MisspeltGroup]:
    """Installed packages whose entry-point group resembles ours but is not it
    (`nightbench.driver`, `nightbench_drivers`, `nightbench-drivers`...)."""
    found: dict[tuple[str, str], list[str]] = {}
    for dist in (distributions() if dists is None else dists):
        for ep in dist.entry_points:
            if ep.group == GROUP or not _resembles(ep.group):
                continue
            found.setdefault((dist.metadata["Name"] or "?", ep.group), []).append(ep.name)
    return [MisspeltGroup(pkg, group, tuple(sorted(names)))
            for (pkg, group), names in sorted(found.items())]


def _resembles(group: str) -> bool:
    plain = "".join(ch for ch in group.lower() if ch.isalnum())
    return (difflib.SequenceMatcher(None, plain, "nightbenchdrivers").ratio() >= 0.85
            or "nightbench" in plain and "driver" in plain)
