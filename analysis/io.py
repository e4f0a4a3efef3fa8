"""Readers for the files a notebook user meets: frame stacks (TIFF) and measured point lists (CSV).

Axis order: images come back as numpy arrays indexed ``[frame, row, col]`` (or ``[row, col]`` for
a single frame); point lists as ``(N, 2)`` arrays of ``(x, y)`` in mm.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np


def read_tiff(path: str | Path) -> np.ndarray:
    """A TIFF image or stack as written by the station (uint or float), via tifffile."""
    import tifffile

    p = Path(path)
    if not p.is_file():
        raise FileNotFoundError(f"{p}: no such TIFF file; check the run folder path")
    return tifffile.imread(p)


def read_points_csv(path: str | Path) -> tuple[np.ndarray, list[tuple[int, int]] | None]:
    """Measured target coordinates: columns ``x_mm, y_mm`` and optionally ``row, col``.

    Returns ``(points (N, 2) as (x, y) mm, labels or None)``; labels are ``(row, col)`` per
    point when both columns are present. Errors name the file and line.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise ValueError(f"{p}: measured coordinates file not found; check the path (relative "
                         "paths are taken from the folder of the file that names it)") from None
    reader = csv.DictReader(text.splitlines())
    header = [h.strip() for h in (reader.fieldnames or [])]
    reader.fieldnames = header
    missing = [c for c in ("x_mm", "y_mm") if c not in header]
    if missing:
        raise ValueError(f"{p}:1: header lacks column(s) {', '.join(missing)}; the first line "
                         "must name the columns, e.g. 'x_mm,y_mm,row,col'")
    has_labels = "row" in header and "col" in header
    points: list[tuple[float, float]] = []
    labels: list[tuple[int, int]] = []
    problems: list[str] = []
    for line_no, rec in enumerate(reader, start=2):
        if not any((v or "").strip() for v in rec.values()):
            continue
        try:
            x, y = float(rec["x_mm"]), float(rec["y_mm"])
            if not (math.isfinite(x) and math.isfinite(y)):
                raise ValueError
            points.append((x, y))
        except (TypeError, ValueError):
            problems.append(f"{p}:{line_no}: x_mm/y_mm must be finite numbers, got "
                            f"{rec.get('x_mm')!r}, {rec.get('y_mm')!r}")
            continue
        if has_labels:
            try:
                labels.append((int(rec["row"]), int(rec["col"])))
            except (TypeError, ValueError):
                problems.append(f"{p}:{line_no}: row/col must be integers, got "
                                f"{rec.get('row')!r}, {rec.get('col')!r}")
    if not points and not problems:
        problems.append(f"{p}: no points found; add one line per pinhole under the header")
    if has_labels and len(set(labels)) != len(labels):
        problems.append(f"{p}: (row, col) labels repeat; each pinhole needs its own label")
    if problems:
        raise ValueError("\n".join(problems))
    return np.array(points, dtype=float), (labels if has_labels else None)
