"""Open-aperture flat fields as the image-quality analyses read them: each capture's absolute
source temperature, the lab reference, and the bad-pixel map from the coolest and warmest flat.

Why one place: NETD, uniformity, 3-D noise and the bad-pixel map all mask the same bad pixels
(found from the same two flats with the same criteria), so their figures describe one set of
pixels and a re-analysis gives the same mask every time.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from analysis.badpixels import BadPixelMap, bad_pixel_map
from station.analyses.registry import AnalysisFailed, AnalysisSite, JsonValue

__all__ = ["Flat", "read_flats", "source_sigma_k", "coolest_and_warmest", "bad_pixels_of",
           "spec_source_c"]


@dataclass(frozen=True)
class Flat:
    """One flat-field capture: its name and the blackbody readings at its start and end."""

    name: str
    source_c: float
    reference_c: float
    source_end_c: float | None = None


def _bb(info: Mapping[str, JsonValue], key: str) -> Mapping[str, JsonValue] | None:
    readings = info.get(key)
    bb = readings.get("blackbody") if isinstance(readings, Mapping) else None
    return bb if isinstance(bb, Mapping) else None


def read_flats(site: AnalysisSite, names: Sequence[str]) -> list[Flat]:
    """The captures' source (the quantity an open-aperture camera sees) and reference readings."""
    out = []
    for name in names:
        info = site.capture_info(name)
        start, end = _bb(info, "readings_start"), _bb(info, "readings_end")
        if start is None or "temperature_c" not in start or "reference_c" not in start:
            raise AnalysisFailed(f"capture {name} has no blackbody readings in its metadata; "
                                 "the analysis needs the source and reference temperatures")
        end_c = (float(end["temperature_c"])  # type: ignore[arg-type]
                 if end is not None and "temperature_c" in end else None)
        out.append(Flat(name, float(start["temperature_c"]),  # type: ignore[arg-type]
                        float(start["reference_c"]), end_c))  # type: ignore[arg-type]
    return out


def source_sigma_k(flats: Sequence[Flat]) -> float:
    """Standard uncertainty of a flat's source temperature: the drift during the capture, taken
    as a uniform spread between its start and end readings (|end - start| / sqrt(12), GUM
    JCGM 100:2008 4.3.7), root mean square over the flats."""
    drifts = [abs(f.source_end_c - f.source_c) / math.sqrt(12.0) for f in flats
              if f.source_end_c is not None]
    return math.sqrt(sum(d * d for d in drifts) / len(drifts)) if drifts else 0.0


def coolest_and_warmest(flats: Sequence[Flat], what: str) -> tuple[Flat, Flat]:
    cool = min(flats, key=lambda f: f.source_c)
    warm = max(flats, key=lambda f: f.source_c)
    if warm.source_c - cool.source_c < 1.0:
        raise AnalysisFailed(f"{what} needs flats at two source temperatures at least 1 K "
                             f"apart; the captures span {cool.source_c:.2f} to "
                             f"{warm.source_c:.2f} C")
    return cool, warm


def bad_pixels_of(site: AnalysisSite, flats: Sequence[Flat], what: str) -> BadPixelMap:
    """The bad-pixel map (analysis.badpixels, default criteria) of the coolest and warmest
    flats' stacks, computed once per run for the same two captures."""
    cool, warm = coolest_and_warmest(flats, what)

    def compute() -> BadPixelMap:
        return bad_pixel_map(site.load_stack(cool.name), site.load_stack(warm.name),
                             conditions={"cool_c": round(cool.source_c, 4),
                                         "warm_c": round(warm.source_c, 4),
                                         "cool_capture": cool.name, "warm_capture": warm.name})
    try:
        return site.remembered("bad pixels", (cool.name, warm.name), compute)
    except ValueError as exc:
        raise AnalysisFailed(f"{what}: {exc}") from None


def spec_source_c(spec_conditions: Mapping[str, Mapping[str, float]], key: str
                  ) -> float | None:
    """The source temperature the UUT file states for `key` (None when it states none)."""
    stated = spec_conditions.get(key, {})
    value = stated.get("source_c")
    return None if value is None else float(value)
