"""Every registered driver entry point follows the driver contract of DEVELOPERS.md.

The contract (DEVELOPERS.md, "How drivers are found"): the class implements the interface of
drivers/interfaces.py that its KIND names, with no abstract method left; SETTINGS maps each
setting to a one-line description; `validate_settings(settings)` is a classmethod returning a
list of texts; the constructor is `cls(transport, *, name, settings)`. Checked on every entry
point of the `nightbench.drivers` group, the simulated camera included (no special case).
"""

from __future__ import annotations

import inspect
from collections.abc import Mapping
from importlib.metadata import entry_points

import pytest

from drivers.interfaces import Blackbody, FrameGrabber, MotionStage, TargetWheel
from drivers.registry import GROUP

INTERFACES = {"blackbody": Blackbody, "wheel": TargetWheel, "stage": MotionStage,
              "camera": FrameGrabber}
ENTRY_POINTS = sorted(entry_points(group=GROUP), key=lambda ep: ep.name)


def test_the_builtin_drivers_are_all_registered() -> None:
    names = {ep.name for ep in ENTRY_POINTS}
    assert {"scpi-blackbody", "scpi-wheel", "scpi-stage", "sim-camera", "tiff-replay",
            "video-capture"} <= names


@pytest.mark.parametrize("ep", ENTRY_POINTS, ids=[ep.name for ep in ENTRY_POINTS])
def test_entry_point_follows_the_driver_contract(ep) -> None:
    cls = ep.load()
    assert inspect.isclass(cls), f"{ep.name}: {ep.value} is not a class"
    kind = getattr(cls, "KIND", None)
    assert kind in INTERFACES, f"{ep.name}: KIND {kind!r} is not one of {sorted(INTERFACES)}"
    assert issubclass(cls, INTERFACES[kind]), f"{ep.name}: not a {INTERFACES[kind].__name__}"
    assert not inspect.isabstract(cls), \
        f"{ep.name}: abstract methods left: {sorted(getattr(cls, '__abstractmethods__', ()))}"
    settings = getattr(cls, "SETTINGS", None)
    assert isinstance(settings, Mapping) and settings, f"{ep.name}: SETTINGS missing"
    assert all(isinstance(k, str) and isinstance(v, str) and v.strip()
               for k, v in settings.items()), f"{ep.name}: SETTINGS must map name -> text"
    validate = inspect.getattr_static(cls, "validate_settings", None)
    assert isinstance(validate, classmethod), f"{ep.name}: validate_settings not a classmethod"
    found = cls.validate_settings({})
    assert isinstance(found, list) and all(isinstance(t, str) for t in found)
    params = inspect.signature(cls.__init__).parameters
    positional = [p for p in params.values()
                  if p.kind in (p.POSITIONAL_ONLY, p.POSITIONAL_OR_KEYWORD)]
    assert [p.name for p in positional][:2] == ["self", "transport"], \
        f"{ep.name}: constructor must be cls(transport, *, name, settings)"
    for keyword in ("name", "settings"):
        assert keyword in params and params[keyword].kind == params[keyword].KEYWORD_ONLY, \
            f"{ep.name}: '{keyword}' must be a keyword-only argument"
