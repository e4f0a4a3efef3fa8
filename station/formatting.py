"""Text forms of numbers shared by the console, the commands and the run record.

Kept below every other station package so the engine, the command line and the report format a
duration or a reading the same way without importing each other.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

__all__ = ["format_duration", "format_value"]


def format_duration(seconds: float | None) -> str:
    """h:mm:ss (or '--:--' when unknown)."""
    if seconds is None or seconds != seconds or seconds < 0:
        return "--:--"
    total = int(round(seconds))
    return f"{total // 3600}:{total % 3600 // 60:02d}:{total % 60:02d}"


def format_value(value: Any, unit: str = "") -> str:
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
