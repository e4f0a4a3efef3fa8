"""Text forms of numbers and instrument readings shared by the console, the commands, the logs
and the report.

Kept below every other station package so the engine, the command line and the report format a
duration or a reading the same way without importing each other. Every number an operator sees
carries its unit; nothing is shown in Python's dict or list syntax.

Readings come as the bench gives them (`Bench.readings()`): one mapping per instrument role::

    {"blackbody": {"mode": "difference", "setpoint": 10.0, "temperature_c": 32.0,
                   "reference_c": 22.0, "stable": True},
     "wheel": {"slot": 2, "target": "pinhole_grid", "moving": False},
     "stage": {"az": 5.0, "el": 0.0, "states": {"az": "READY", "el": "READY"}},
     "camera": {"frames": 120, "frame_rate_hz": 30.0}}

Example::

    >>> reading_lines({"blackbody": {"mode": "difference", "setpoint": 10.0,
    ...                "temperature_c": 32.004, "reference_c": 22.0, "stable": True}})
    [('blackbody', 'difference +10.004 K (source 32.004 C, reference 22.000 C), setpoint +10.000 K, stable')]
    >>> reading_lines({"stage": {"az": -11.0, "el": 2.125, "states": {"az": "READY"}}},
    ...               axis_units={"az": "deg", "el": "deg"})
    [('stage', 'az -11.000 deg, el +2.125 deg')]
"""

from __future__ import annotations

import datetime as _dt
from collections.abc import Mapping, Sequence
from typing import Any

__all__ = ["format_duration", "format_value", "format_measurement", "format_clock_time",
           "format_params", "reading_lines", "readings_text", "columns_text", "ROLE_ORDER"]

ROLE_ORDER = ("blackbody", "wheel", "stage", "camera")
IDLE_AXIS_STATES = frozenset({"READY", "IDLE", "STOPPED", "PARKED", "OK"})


def format_duration(seconds: float | None) -> str:
    """h:mm:ss (or '--:--' when unknown)."""
    if seconds is None or seconds != seconds or seconds < 0:
        return "--:--"
    total = int(round(seconds))
    return f"{total // 3600}:{total % 3600 // 60:02d}:{total % 60:02d}"


def format_clock_time(epoch_s: float, now_s: float | None = None) -> str:
    """Local clock time HH:MM, with the date when it is not today (for an expected end)."""
    moment = _dt.datetime.fromtimestamp(epoch_s).astimezone()
    today = _dt.datetime.fromtimestamp(now_s).astimezone().date() if now_s is not None \
        else _dt.datetime.now().astimezone().date()
    text = moment.strftime("%H:%M")
    return text if moment.date() == today else f"{moment.strftime('%a %d %b')} {text}"


def format_value(value: Any, unit: str = "") -> str:
    """One value as an operator reads it: 3 decimals for floats, mappings as `name value`,
    sequences comma-separated; never Python syntax."""
    if isinstance(value, Mapping):
        return ", ".join(f"{k} {format_value(v)}" for k, v in value.items())
    if isinstance(value, bool):
        text = "yes" if value else "no"
    elif isinstance(value, float):
        text = f"{value:.3f}"
    elif value is None:
        text = "-"
    elif isinstance(value, (list, tuple, set, frozenset)):
        text = ", ".join(format_value(v) for v in value)
    else:
        text = str(value)
    return f"{text} {unit}".rstrip()


def format_measurement(value: float, sigma: float, unit: str = "", show_sigma: bool = True
                       ) -> str:
    """``value +/- sigma unit`` with the uncertainty rounded to two significant digits and the
    value to the same decimal place (GUM, JCGM 100:2008, 7.2.6). No stated uncertainty (0 or
    not finite): the value to four significant digits.

    >>> format_measurement(41.23456, 1.8765, "mK")
    '41.2 +/- 1.9 mK'
    >>> format_measurement(-1.08321, 0.0123, "%")
    '-1.083 +/- 0.012 %'
    >>> format_measurement(1234.5, 0.0, "px")
    '1234 px'
    >>> format_measurement(8.7654, 1.8765, "mK", show_sigma=False)
    '8.8 mK'
    """
    import math

    if not math.isfinite(value):
        return f"{value} {unit}".rstrip()
    if not (math.isfinite(sigma) and sigma > 0):
        return f"{value:.4g} {unit}".rstrip()
    decimals = 1 - int(math.floor(math.log10(abs(sigma))))
    if decimals > 0:
        shown, spread = f"{value:.{decimals}f}", f"{sigma:.{decimals}f}"
    else:
        step = 10 ** (-decimals)
        shown, spread = f"{round(value / step) * step:.0f}", f"{round(sigma / step) * step:.0f}"
    text = f"{shown} +/- {spread}" if show_sigma else shown
    return f"{text} {unit}".rstrip()


def _num(value: Any, unit: str, signed: bool = False, decimals: int = 3) -> str:
    if not isinstance(value, (int, float)) or isinstance(value, bool):
        return f"{format_value(value)} {unit}".rstrip()
    return f"{value:{'+' if signed else ''}.{decimals}f} {unit}".rstrip()


def blackbody_text(r: Mapping[str, Any]) -> str:
    """Difference (K), source and reference (C), setpoint in the unit of its mode, stability."""
    mode = str(r.get("mode", "absolute"))
    source, reference = r.get("temperature_c"), r.get("reference_c")
    parts: list[str] = []
    if isinstance(source, (int, float)) and isinstance(reference, (int, float)):
        difference = float(source) - float(reference)
        if mode == "difference":
            parts.append(f"difference {_num(difference, 'K', signed=True)} (source "
                         f"{_num(source, 'C')}, reference {_num(reference, 'C')})")
        else:
            parts.append(f"source {_num(source, 'C')} (reference {_num(reference, 'C')}, "
                         f"difference {_num(difference, 'K', signed=True)})")
    elif source is not None:
        parts.append(f"source {_num(source, 'C')}")
    if "setpoint" in r:
        parts.append("setpoint " + (_num(r["setpoint"], "K", signed=True) if mode == "difference"
                                    else _num(r["setpoint"], "C")))
    if "stable" in r:
        parts.append("stable" if r["stable"] else "settling")
    return ", ".join(parts)


def wheel_text(r: Mapping[str, Any]) -> str:
    """Slot number and target name."""
    text = f"slot {format_value(r.get('slot'))}"
    if r.get("target"):
        text += f" {r['target']}"
    if r.get("moving"):
        text += ", moving"
    return text


def stage_text(r: Mapping[str, Any], axis_units: Mapping[str, str] | None = None) -> str:
    """Every axis with its unit; an axis not at rest says its state."""
    units = axis_units or {}
    states = r.get("states") if isinstance(r.get("states"), Mapping) else {}
    parts = []
    for axis, value in r.items():
        if axis == "states":
            continue
        text = f"{axis} {_num(value, units.get(axis, ''), signed=True)}"
        state = states.get(axis)
        if state is not None and str(state).upper() not in IDLE_AXIS_STATES:
            text += f" ({str(state).lower()})"
        parts.append(text)
    return ", ".join(parts)


def camera_text(r: Mapping[str, Any]) -> str:
    """Frame counter and frame rate."""
    parts = []
    if "frames" in r:
        parts.append(f"frame {format_value(r['frames'])}")
    if "frame_rate_hz" in r:
        parts.append(f"at {_num(r['frame_rate_hz'], 'Hz', decimals=1)}")
    rest = {k: v for k, v in r.items() if k not in ("frames", "frame_rate_hz")}
    if rest:
        parts.append(format_value(rest))
    return " ".join(parts)


def reading_lines(readings: Mapping[str, Any], *,
                  axis_units: Mapping[str, str] | None = None) -> list[tuple[str, str]]:
    """(instrument, text) per instrument role, blackbody-wheel-stage-camera first."""
    out: list[tuple[str, str]] = []
    roles = [r for r in ROLE_ORDER if r in readings] + sorted(
        r for r in readings if r not in ROLE_ORDER)
    for role in roles:
        value = readings[role]
        if isinstance(value, Mapping) and "error" in value:
            out.append((role, f"NOT ANSWERING: {value['error']}"))
        elif not isinstance(value, Mapping):
            out.append((role, format_value(value)))
        elif role == "blackbody":
            out.append((role, blackbody_text(value)))
        elif role == "wheel":
            out.append((role, wheel_text(value)))
        elif role == "stage":
            out.append((role, stage_text(value, axis_units)))
        elif role == "camera":
            out.append((role, camera_text(value)))
        else:
            out.append((role, format_value(value)))
    return out


def readings_text(readings: Mapping[str, Any], *, axis_units: Mapping[str, str] | None = None,
                  separator: str = "; ") -> str:
    """All readings on one line (plain logs)."""
    return separator.join(f"{role} {text}" for role, text in
                          reading_lines(readings, axis_units=axis_units))


def columns_text(header: Sequence[str], rows: Sequence[Sequence[Any]]) -> str:
    """Plain aligned columns (fast for long lists: no table layout engine)."""
    cells = [[str(c) for c in header]] + [[str(c) for c in r] for r in rows]
    widths = [max(len(row[i]) for row in cells) for i in range(len(header))]
    lines = ["  ".join(c.ljust(w) for c, w in zip(row, widths)).rstrip() for row in cells]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return "\n".join(lines)


def _short(value: Any) -> str:
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, Mapping):
        return ", ".join(f"{k} {_short(v)}" for k, v in value.items())
    if isinstance(value, (list, tuple, set, frozenset)):
        return ", ".join(_short(v) for v in value)
    return "-" if value is None else str(value)


def format_params(params: Mapping[str, Any], skip: Sequence[str] = ()) -> str:
    """A step's parameters on one line: `mode difference, value 30, hold 10`; a nested mapping
    is written inline (`position az -11, el 2.125`), lists comma-separated.

    >>> format_params({"position": {"az": -11.0, "el": 2.125}, "captures": ["grid"]})
    'position az -11, el 2.125; captures grid'
    """
    return "; ".join(f"{k} {_short(v)}" for k, v in params.items()
                     if k not in skip and v not in ({}, [], ()))
