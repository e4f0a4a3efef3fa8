"""Pieces the boresight and FOV glue share: the reference pixel option and step outputs read
back from the run folder (alignment.json, fov_scan.json)."""

from __future__ import annotations

import json
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from analysis.uut import UutSpec
from station.analyses.registry import AnalysisFailed, AnalysisSite, OptionSpec

__all__ = ["REFERENCE_OPTION", "reference_px", "step_output"]

REFERENCE_OPTION = OptionSpec(
    "reference", "text", "centre",
    "the reference pixel: 'centre' (the detector's geometric centre) or 'x,y' in pixels "
    "(x = column, y = row, origin at the centre of the top-left pixel)")


def reference_px(value: object, uut: UutSpec) -> tuple[float, float]:
    """The reference pixel (x, y) from the option's text; the UUT's own if it states one."""
    text = str(value).strip().lower()
    if text in ("centre", "center"):
        stated = getattr(uut, "reference_px", None)
        if stated is not None:
            return float(stated[0]), float(stated[1])
        return (uut.width - 1) / 2.0, (uut.height - 1) / 2.0
    try:
        x, y = (float(v) for v in text.split(","))
    except ValueError:
        raise AnalysisFailed(f"option 'reference' must be 'centre' or 'x,y' in pixels, not "
                             f"{value!r}") from None
    if not (-0.5 <= x <= uut.width - 0.5 and -0.5 <= y <= uut.height - 0.5):
        raise AnalysisFailed(f"reference pixel ({x:g}, {y:g}) is outside the {uut.width}x"
                             f"{uut.height} detector")
    return x, y


def step_output(site: AnalysisSite, file_name: str) -> Mapping[str, Any] | None:
    """A step's JSON output (alignment.json, fov_scan.json) from the site's results or, when
    re-analysing into another folder, from the run folder's own results; None if absent."""
    places = [Path(site.results_dir) / file_name]
    run_path = getattr(site, "run_path", None)
    if run_path is not None:
        places.append(Path(run_path) / "results" / file_name)
    for place in places:
        if place.is_file():
            try:
                data = json.loads(place.read_text(encoding="utf-8"))
            except (OSError, ValueError) as exc:
                raise AnalysisFailed(f"{place}: unreadable ({exc}); re-run the step that writes "
                                     "it") from None
            return data if isinstance(data, Mapping) else None
    return None
