"""The GenICam driver is an optional extra: without harvesters it says what to install."""

from __future__ import annotations

import importlib.util

import pytest

from drivers.errors import InstrumentConnectionError
from drivers.genicam import GenicamGrabber
from drivers.registry import list_drivers


@pytest.mark.skipif(importlib.util.find_spec("harvesters") is not None,
                    reason="harvesters is installed here")
def test_missing_harvesters_gives_a_clear_message() -> None:
    with pytest.raises(InstrumentConnectionError) as err:
        GenicamGrabber(settings={"resource": "genicam:0", "producer": "/opt/x.cti"})
    assert "pip install harvesters" in str(err.value)
    # listed all the same: the registry loads the class, not the optional package
    (info,) = [d for d in list_drivers() if d.name == "genicam-harvesters"]
    assert info.kind == "camera" and set(info.settings) >= {"resource", "producer"}


def test_settings_are_checked_first() -> None:
    assert GenicamGrabber.validate_settings({"resource": "cam0"}) == [
        "resource: must be genicam:<index> or genicam:<serial number>",
        "producer: missing; the path of the GenTL producer (.cti)"]
