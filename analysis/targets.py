"""Targets that sit in the wheel, as plain frozen (hashable) dataclasses.

Plate coordinates are ``(x, y)`` in mm on the target plate, origin on the collimator axis, axes as
described in `analysis.geometry` (the collimator inverts them onto the image). Pinhole lists are
ordered row-major and labelled ``(row, col)``; a grid's row 0 is at the most negative y.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Union

import numpy as np

from analysis.io import read_points_csv


@dataclass(frozen=True)
class PinholeGrid:
    """A rectangular grid of pinholes, or measured coordinates of a real grid (`points`)."""

    rows: int
    cols: int
    pitch_mm: float
    diameter_mm: float
    offset_mm: tuple[float, float] = (0.0, 0.0)
    points: tuple[tuple[float, float], ...] | None = None
    point_labels: tuple[tuple[int, int], ...] | None = None
    kind: str = field(default="pinhole_grid", init=False)

    def points_mm(self) -> np.ndarray:
        """(N, 2) plate coordinates (x, y) mm, row-major.

        >>> PinholeGrid(rows=3, cols=3, pitch_mm=10.0, diameter_mm=1.0).points_mm()[:2].tolist()
        [[-10.0, -10.0], [0.0, -10.0]]
        """
        if self.points is not None:
            return np.array(self.points, dtype=float).reshape(-1, 2)
        c = (np.arange(self.cols) - (self.cols - 1) / 2.0) * self.pitch_mm + self.offset_mm[0]
        r = (np.arange(self.rows) - (self.rows - 1) / 2.0) * self.pitch_mm + self.offset_mm[1]
        xx, yy = np.meshgrid(c, r)
        return np.column_stack([xx.ravel(), yy.ravel()])

    def labels(self) -> list[tuple[int, int]]:
        """(row, col) of each point, in the order of `points_mm`."""
        if self.point_labels is not None:
            return list(self.point_labels)
        if self.points is not None:
            return [(0, i) for i in range(len(self.points))]
        return [(r, c) for r in range(self.rows) for c in range(self.cols)]


@dataclass(frozen=True)
class SinglePinhole:
    """One pinhole, usually on axis (boresight, blur spot)."""

    diameter_mm: float
    x_mm: float = 0.0
    y_mm: float = 0.0
    kind: str = field(default="single_pinhole", init=False)

    def points_mm(self) -> np.ndarray:
        return np.array([[self.x_mm, self.y_mm]], dtype=float)

    def labels(self) -> list[tuple[int, int]]:
        return [(0, 0)]


@dataclass(frozen=True)
class SlantedEdge:
    """A straight edge through the plate centre, tilted `angle_deg` from the plate's y axis.

    The open (source) side is the half-plane ``x cos(a) - y sin(a) > 0`` (for a = 0: x > 0).
    """

    angle_deg: float = 5.0
    kind: str = field(default="slanted_edge", init=False)


@dataclass(frozen=True)
class OpenAperture:
    """No plate in the beam: the UUT sees the source radiance everywhere (uniformity, NETD)."""

    kind: str = field(default="open_aperture", init=False)


Target = Union[PinholeGrid, SinglePinhole, SlantedEdge, OpenAperture]
KINDS = ("pinhole_grid", "single_pinhole", "slanted_edge", "open_aperture")


def _number(d: dict[str, Any], key: str, problems: list[str], *, positive: bool = True,
            default: float | None = None, integer: bool = False) -> Any:
    if key not in d:
        if default is not None:
            return default
        problems.append(f"{key}: missing; add '{key}: <{'integer' if integer else 'number'}>'")
        return None
    v = d[key]
    ok = isinstance(v, int) if integer else isinstance(v, (int, float))
    if isinstance(v, bool) or not ok or not math.isfinite(float(v)):
        problems.append(f"{key}: expected {'an integer' if integer else 'a number'}, got {v!r}")
        return None
    if positive and v <= 0:
        problems.append(f"{key}: must be > 0, got {v!r}")
        return None
    return int(v) if integer else float(v)


def _pair(d: dict[str, Any], key: str, problems: list[str]) -> tuple[float, float]:
    v = d.get(key, (0.0, 0.0))
    if (not isinstance(v, (list, tuple)) or len(v) != 2
            or not all(isinstance(a, (int, float)) and not isinstance(a, bool) for a in v)):
        problems.append(f"{key}: expected two numbers [x, y] in mm, got {v!r}")
        return (0.0, 0.0)
    return (float(v[0]), float(v[1]))


_ALLOWED = {
    "pinhole_grid": {"kind", "rows", "cols", "pitch_mm", "diameter_mm", "offset_mm",
                     "measured_csv", "name"},
    "single_pinhole": {"kind", "diameter_mm", "x_mm", "y_mm", "name"},
    "slanted_edge": {"kind", "angle_deg", "name"},
    "open_aperture": {"kind", "name"},
}


def target_from_mapping(d: dict[str, Any], base_dir: Path) -> Target:
    """Build a target from a station-file mapping; `ValueError` lists every problem found.

    Each problem reads ``key: what is wrong; what to do`` (the station loader adds file:line).
    A measured grid names ``measured_csv`` (columns x_mm, y_mm[, row, col]), relative to
    `base_dir`; `rows`, `cols` and `pitch_mm` are then optional.
    """
    if not isinstance(d, dict):
        raise ValueError(f"target: expected a mapping with 'kind', got {d!r}")
    kind = d.get("kind")
    if kind not in KINDS:
        raise ValueError(f"kind: {kind!r} is not a target kind; use one of {', '.join(KINDS)}")
    problems = [f"{k}: not a key of a {kind} target; allowed keys are "
                f"{', '.join(sorted(_ALLOWED[kind]))}" for k in d if k not in _ALLOWED[kind]]
    target: Target | None = None
    if kind == "pinhole_grid":
        diameter = _number(d, "diameter_mm", problems)
        if "measured_csv" in d:
            path = Path(base_dir) / str(d["measured_csv"])
            try:
                pts, labels = read_points_csv(path)
            except ValueError as exc:
                problems.append(f"measured_csv: {exc}")
                pts, labels = None, None
            if pts is not None and diameter is not None:
                rows = max((r for r, _ in labels), default=0) + 1 if labels else 1
                cols = max((c for _, c in labels), default=0) + 1 if labels else len(pts)
                target = PinholeGrid(rows=rows, cols=cols,
                                     pitch_mm=float(d.get("pitch_mm", 0.0) or 0.0),
                                     diameter_mm=diameter,
                                     points=tuple(map(tuple, pts.tolist())),
                                     point_labels=tuple(labels) if labels else None)
        else:
            rows = _number(d, "rows", problems, integer=True)
            cols = _number(d, "cols", problems, integer=True)
            pitch = _number(d, "pitch_mm", problems)
            offset = _pair(d, "offset_mm", problems)
            if pitch is not None and diameter is not None and diameter >= pitch:
                problems.append(f"diameter_mm: {diameter} is not smaller than pitch_mm {pitch}; "
                                "pinholes would overlap")
            if None not in (rows, cols, pitch, diameter) and not problems:
                target = PinholeGrid(rows=rows, cols=cols, pitch_mm=pitch,
                                     diameter_mm=diameter, offset_mm=offset)
    elif kind == "single_pinhole":
        diameter = _number(d, "diameter_mm", problems)
        x = _number(d, "x_mm", problems, positive=False, default=0.0)
        y = _number(d, "y_mm", problems, positive=False, default=0.0)
        if None not in (diameter, x, y):
            target = SinglePinhole(diameter_mm=diameter, x_mm=x, y_mm=y)
    elif kind == "slanted_edge":
        angle = _number(d, "angle_deg", problems, positive=False, default=5.0)
        if angle is not None:
            target = SlantedEdge(angle_deg=angle)
    else:
        target = OpenAperture()
    if problems or target is None:
        raise ValueError("\n".join(problems) or f"{kind}: incomplete target")
    return target
