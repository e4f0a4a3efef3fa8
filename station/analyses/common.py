"""Small pieces every analysis glue shares: readings of a capture, spec verdicts, result files."""

from __future__ import annotations

import math
from collections.abc import Mapping
from pathlib import Path

from analysis.uut import UutSpec
from analysis.verdicts import SpecKey, Verdict
from station.analyses.registry import AnalysisFailed, AnalysisSite, JsonValue
from station.inputs.config import StationConfig
from station.record.atomic import write_json_atomic

__all__ = ["blackbody_reading", "pose_deg", "judge_spec", "write_result"]

_TO_DEG = {"deg": 1.0, "degree": 1.0, "degrees": 1.0, "rad": 180.0 / math.pi,
           "mrad": 0.18 / math.pi, "arcmin": 1.0 / 60.0, "arcsec": 1.0 / 3600.0}


def blackbody_reading(info: Mapping[str, JsonValue], name: str) -> tuple[float, float]:
    """(source C, reference C) recorded at the start of a capture."""
    readings = info.get("readings_start")
    bb = readings.get("blackbody") if isinstance(readings, Mapping) else None
    if isinstance(bb, Mapping) and "temperature_c" in bb and "reference_c" in bb:
        return float(bb["temperature_c"]), float(bb["reference_c"])  # type: ignore[arg-type]
    raise AnalysisFailed(f"capture {name} has no blackbody readings in its metadata; the "
                         "analysis needs the source and reference temperatures")


def pose_deg(info: Mapping[str, JsonValue], name: str, station: StationConfig
             ) -> tuple[float, float]:
    """(az, el) in degrees where the stage was at the start of a capture.

    Each axis's unit comes from the station file; a capture without az and el readings is an
    error, never a silent (0, 0).
    """
    readings = info.get("readings_start")
    stage = readings.get("stage") if isinstance(readings, Mapping) else None
    if not isinstance(stage, Mapping) or "az" not in stage or "el" not in stage:
        raise AnalysisFailed(f"capture {name} has no az and el stage readings; this analysis "
                             "needs a stage with angular az and el axes")
    out = []
    for axis in ("az", "el"):
        limits = station.axes.get(axis)
        unit = limits.unit if limits is not None else "deg"
        if unit not in _TO_DEG:
            raise AnalysisFailed(f"stage axis {axis} is in {unit!r}, not an angle; this analysis "
                                 "needs angular az and el axes")
        out.append(float(stage[axis]) * _TO_DEG[unit])  # type: ignore[arg-type]
    return out[0], out[1]


def judge_spec(uut: UutSpec, key: SpecKey, value: float, sigma: float,
               measured: Mapping[str, JsonValue] | None = None) -> Verdict | None:
    """The verdict on ``key`` if the UUT file gives it a limit (None otherwise).

    The verdict's conditions are those measured, beside those the spec states
    (``spec_<name>``), so a reader sees both.
    """
    limit = uut.spec_limits.get(key.key)
    if limit is None:
        return None
    conditions: dict[str, object] = dict(measured or {})
    for name, stated in uut.spec_conditions.get(key.key, {}).items():
        conditions[f"spec_{name}"] = stated
    return key.judge(value, sigma, limit, conditions)


def write_result(site: AnalysisSite, file_name: str, data: Mapping[str, object]) -> Path:
    """Write one JSON result file inside the site's results folder and register it."""
    path = write_json_atomic(site.result_path(file_name), dict(data))
    site.register(path)
    return path
