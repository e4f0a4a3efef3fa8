"""Driver registry through the `nightbench.drivers` entry points of pyproject.toml."""

from __future__ import annotations

import pytest

from drivers.blackbody_scpi import ScpiBlackbody
from drivers.registry import UnknownDriverError, find_driver, list_drivers
from drivers.transport import parse_resource
from drivers.errors import ResourceStringError


def test_builtins_are_registered_with_kind_and_settings():
    infos = {d.name: d for d in list_drivers()}
    assert {"scpi-blackbody", "scpi-wheel", "scpi-stage"} <= set(infos)
    assert infos["scpi-stage"].kind == "stage" and "axes" in infos["scpi-stage"].settings
    assert find_driver("scpi-blackbody") is ScpiBlackbody


def test_unknown_driver_lists_known_names():
    with pytest.raises(UnknownDriverError, match="known drivers: .*scpi-wheel"):
        find_driver("scpi-wheeel")
    assert issubclass(UnknownDriverError, KeyError)


@pytest.mark.parametrize("resource,backend,interface", [
    ("TCPIP::10.0.0.5::5025::SOCKET", "visa", "TCPIP"),
    ("TCPIP::10.0.0.5::INSTR", "visa", "TCPIP"),
    ("ASRL/dev/ttyUSB0::INSTR", "visa", "ASRL"),
    ("ASRLsocket://127.0.0.1:5000::INSTR", "visa", "ASRL"),
    ("GPIB0::12::INSTR", "visa", "GPIB"),
    ("/dev/ttyUSB0", "serial", "device"),
    ("COM3", "serial", "device"),
    ("socket://127.0.0.1:5000", "serial", "socket"),
    ("loop://", "serial", "loop"),
    ("rfc2217://10.0.0.9:4001", "serial", "rfc2217"),
])
def test_parse_resource_accepts_the_documented_forms(resource, backend, interface):
    info = parse_resource(resource)
    assert (info.backend, info.interface) == (backend, interface)


def test_parse_resource_serial_settings_and_refusals():
    info = parse_resource("/dev/ttyUSB0?baud=9600&parity=E&stopbits=2")
    assert info.address == "/dev/ttyUSB0"
    assert dict(info.serial_settings) == {"baud": 9600, "parity": "E", "stopbits": 2.0}
    for bad in ("", "http://example.invalid", "TCPIP::", "/dev/ttyUSB0?baud=fast"):
        with pytest.raises(ResourceStringError):
            parse_resource(bad)
    with pytest.raises(ResourceStringError, match="accepted forms"):
        parse_resource("blackbody-1")


def test_drivers_validate_their_station_settings_without_a_connection():
    from drivers.stage_scpi import ScpiStage
    from drivers.wheel_scpi import ScpiWheel

    good = {"limits": {"min_c": 0, "max_c": 100, "min_difference_k": -20,
                       "max_difference_k": 60}, "safe_c": 22}
    assert ScpiBlackbody.validate_settings(good) == []
    bad = {**good, "safe_c": 150}
    assert ScpiBlackbody.validate_settings(bad) == ["safe_c: 150.0 C outside the limits "
                                                    "0.0..100.0 C"]
    assert ScpiStage.validate_settings({"axes": {"az": {"min": -5, "max": 5, "park": 9}}}) == [
        "axes.az.park: 9.0 outside -5.0..5.0"]
    assert ScpiWheel.validate_settings({"slots": {"one": "open"}}) == [
        "slots.one: is not a slot number"]
