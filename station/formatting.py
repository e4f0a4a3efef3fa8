"""Text forms of numbers shared by the console, the commands and the run record.

Kept below every other station package so the engine, the command line and the report format a
duration or a reading the same way without importing each other.
"""

from __future__ import annotations

from collections.abc import Mapping

__all__ = ["format_duration", "format_value", "format_measurement"]


def format_duration(seconds: float | None) -> str:
    """h:mm:ss (or '--:--' when unknown)."""
    if seconds is None or seconds != seconds or seconds < 0:
        return "--:--"
    total = int(round(seconds))
    return f"{total // 3600}:{total % 3600 // 60:02d}:{total % 60:02d}"


def format_value(value: object, unit: str = "") -> str:
    """Readings as an operator reads them: 3 decimals for floats, axes as name=value."""
    if isinstance(value, Mapping):
        return "  ".join(f"{k}={format_value(v)}" for k, v in value.items())
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        text = f"{value:.3f}"
    elif value is None:
        text = "-"
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
