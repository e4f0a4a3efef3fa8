"""Instrument timing models for the duration estimate.

A real bench states them in its station file (`timing:` under each instrument, from the maker's
data sheet or a measurement); a simulated bench takes them from its physics; otherwise
conservative defaults apply and the estimate says so.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from sequences.facts import TimingModel
from sequences.yamlsource import Problem, SourceError, SourceRef, is_number
from station.inputs.config import StationConfig

DEFAULTS = {"time_constant_s": 60.0, "slew_k_per_s": 0.1, "seconds_per_slot": 2.0,
            "velocity": 5.0, "acceleration": 10.0}


POSITIVE = ("velocity", "acceleration", "slew_k_per_s")


def _number(station: StationConfig, section: Mapping[str, Any], key: str, default: float) -> float:
    """A timing number of the station file: finite (positive for rates), else a SourceError
    naming the place, so that no estimate comes out infinite."""
    value = section.get(key, default)
    positive = key in POSITIVE
    if is_number(value) and (float(value) > 0 or not positive):
        return float(value)
    ref_of = getattr(section, "ref_of", None)
    where = ref_of(key) if ref_of is not None else SourceRef(str(station.path), 1, 1)
    need = "a positive finite number" if positive else "a finite number"
    raise SourceError([Problem(where, f"'{key}' must be {need}, not {value!r}; the duration "
                                      "estimate is built from it")])


def _timing(station: StationConfig, role: str) -> Mapping[str, Any]:
    entry = station.instruments.get(role)
    declared = dict(entry.settings.get("timing", {})) if entry else {}
    sim = dict((station.simulation or {}).get("bench", {}).get(role, {}))
    return {**sim, **declared}


def timing_model(station: StationConfig, *, frame_rate_hz: float, frame_shape: tuple[int, int],
                 start_c: float | None = None) -> TimingModel:
    """Build the estimate's model from the station file (and the simulator's physics)."""
    bb = _timing(station, "blackbody")
    wheel = _timing(station, "wheel")
    stage_section = _timing(station, "stage")
    stage = {**stage_section, **dict(stage_section.get("axes", {}))}
    reference = _number(station, bb, "reference_c", 22.0)
    velocity = {}
    accel = {}
    for axis in station.axes:
        spec = stage.get(axis, {}) if isinstance(stage.get(axis), Mapping) else {}
        velocity[axis] = _number(station, spec, "velocity",
                                 _number(station, stage, "velocity", DEFAULTS["velocity"]))
        accel[axis] = _number(station, spec, "acceleration",
                              _number(station, stage, "acceleration", DEFAULTS["acceleration"]))
    return TimingModel(
        blackbody_slew_k_per_s=_number(station, bb, "slew_k_per_s", DEFAULTS["slew_k_per_s"]),
        blackbody_time_constant_s=_number(station, bb, "time_constant_s",
                                          DEFAULTS["time_constant_s"]),
        blackbody_start_c=float(start_c if start_c is not None
                                else _number(station, bb, "start_c", reference)),
        reference_c=reference,
        wheel_seconds_per_slot=_number(station, wheel, "seconds_per_slot",
                                       DEFAULTS["seconds_per_slot"]),
        wheel_slot_of={s.name: n for n, s in station.slots.items()},
        wheel_slot_count=max(station.slots) if station.slots else 1,
        stage_velocity=velocity,
        stage_acceleration=accel,
        frame_rate_hz=frame_rate_hz,
        frame_bytes=int(frame_shape[0] * frame_shape[1] * 2),
        wheel_start_slot=wheel.get("start_slot"),
        stage_start={a: _number(station, stage[a], "start", 0.0) for a in station.axes
                     if isinstance(stage.get(a), Mapping)},
    )
