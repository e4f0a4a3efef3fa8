"""Load a UUT file (YAML) into `analysis.uut.UutSpec`, reporting every problem with file:line.

Layout (see station/data/demo_uut.yaml)::

    model: ...            serial: ...
    format:   {width, height, pixel_pitch_um, reference_px (optional: [x, y], the boresight's
               reference pixel; the detector's geometric centre when absent)}
    optics:   {focal_length_mm, f_number, projection}
    band_um: [lo, hi]     frame_rate_hz: ...     bit_depth: ...
    spec_limits: {name: number, name: {limit: number, <condition>: number, ...}, ...}

A spec key names exactly one quantity, the one the analysis that evaluates it declares
(station/analyses/*.py, `spec_keys`); conditions beside a limit (``source_c``, ``background_c``
for NETD) say where it is defined, and `nightbench check` compares them with the recipe.

All problems are collected and raised together in one `UutFileError`, so the author fixes the file
in one pass.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

from analysis.geometry import PROJECTIONS
from analysis.uut import UutSpec
from sequences.yamlsource import (MarkedDict, Problem, SourceError, SourceRef, is_number,
                                  load_yaml)


class UutFileError(SourceError):
    """Every problem of one UUT file (a `ValueError`); `str()` gives one line per problem."""


_SECTIONS: dict[str, tuple[str, ...]] = {
    "format": ("width", "height", "pixel_pitch_um", "reference_px"),
    "optics": ("focal_length_mm", "f_number", "projection"),
}
_TOP = ("model", "serial", "format", "optics", "band_um", "frame_rate_hz", "bit_depth",
        "spec_limits")


class _Reader:
    def __init__(self, file: str) -> None:
        self.file = file
        self.problems: list[Problem] = []

    def add(self, where: SourceRef, message: str, hint: str) -> None:
        self.problems.append(Problem(where, message, hint))

    def section(self, doc: MarkedDict, name: str) -> MarkedDict | None:
        if name not in doc:
            self.add(doc.ref(), f"{name}: missing section",
                     f"add '{name}:' with keys {', '.join(_SECTIONS[name])}")
            return None
        sec = doc[name]
        if not isinstance(sec, MarkedDict):
            self.add(doc.ref_of(name), f"{name}: expected a mapping, got {sec!r}",
                     f"indent the keys {', '.join(_SECTIONS[name])} under '{name}:'")
            return None
        for key in sec:
            if key not in _SECTIONS[name]:
                self.add(sec.key_ref(key), f"{name}.{key}: unknown key",
                         f"allowed keys are {', '.join(_SECTIONS[name])}")
        return sec

    def text(self, doc: MarkedDict, key: str) -> str | None:
        if key not in doc:
            self.add(doc.ref(), f"{key}: missing", f"add '{key}: <text>'")
            return None
        v = doc[key]
        if v is None or isinstance(v, (dict, list)) or str(v).strip() == "":
            self.add(doc.ref_of(key), f"{key}: expected text, got {v!r}", "write it as plain text")
            return None
        return str(v)

    def number(self, m: MarkedDict | None, key: str, path: str, *, integer: bool = False,
               lo: float = 0.0, hi: float = math.inf) -> Any:
        if m is None:
            return None
        if key not in m:
            self.add(m.ref(), f"{path}: missing", f"add '{key}: <number>'")
            return None
        v = m[key]
        kind = "a whole number" if integer else "a number"
        if not is_number(v, integer=integer):
            self.add(m.ref_of(key), f"{path}: expected {kind}, got {v!r}", f"write {kind}")
            return None
        if not (lo < v <= hi):
            self.add(m.ref_of(key), f"{path}: {v!r} is out of range",
                     f"use a value above {lo:g}"
                     + ("" if math.isinf(hi) else f" and at most {hi:g}"))
            return None
        return int(v) if integer else float(v)


def load_uut(path: str | Path) -> UutSpec:
    """Read and validate a UUT file; raise `UutFileError` listing every problem."""
    file = str(path)
    try:
        doc = load_yaml(path)
    except SourceError as exc:
        raise UutFileError(exc.problems) from None
    r = _Reader(file)
    if not isinstance(doc, MarkedDict):
        hint = f"start from station/data/demo_uut.yaml; keys: {', '.join(_TOP)}"
        raise UutFileError([Problem(doc.ref(), "the UUT file must be a mapping of keys", hint)])
    for key in doc:
        if key not in _TOP:
            r.add(doc.key_ref(key), f"{key}: unknown key", f"allowed keys are {', '.join(_TOP)}")
    model = r.text(doc, "model")
    serial = r.text(doc, "serial")
    fmt = r.section(doc, "format")
    opt = r.section(doc, "optics")
    width = r.number(fmt, "width", "format.width", integer=True)
    height = r.number(fmt, "height", "format.height", integer=True)
    pitch = r.number(fmt, "pixel_pitch_um", "format.pixel_pitch_um", hi=1000.0)
    focal = r.number(opt, "focal_length_mm", "optics.focal_length_mm")
    f_number = r.number(opt, "f_number", "optics.f_number")
    projection = None
    if opt is not None:
        projection = opt.get("projection", "rectilinear")
        if projection not in PROJECTIONS:
            r.add(opt.ref_of("projection"), f"optics.projection: {projection!r} is not known",
                  f"use one of {', '.join(PROJECTIONS)}")
    band = None
    if "band_um" not in doc:
        r.add(doc.ref(), "band_um: missing", "add 'band_um: [lo, hi]' in micrometres, e.g. [8, 12]")
    else:
        b = doc["band_um"]
        if (not isinstance(b, list) or len(b) != 2
                or not all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in b)
                or not 0 <= b[0] < b[1]):
            r.add(doc.ref_of("band_um"), f"band_um: expected [lo, hi] with 0 <= lo < hi, got {b!r}",
                  "write the spectral band in micrometres, e.g. [8, 12] or [3, 5]")
        else:
            band = (float(b[0]), float(b[1]))
    reference = _reference_px(r, fmt, width, height)
    rate = r.number(doc, "frame_rate_hz", "frame_rate_hz")
    bits = r.number(doc, "bit_depth", "bit_depth", integer=True, hi=16)
    limits: dict[str, float] = {}
    conditions: dict[str, dict[str, float]] = {}
    sl = doc.get("spec_limits", {})
    if sl is None:
        sl = {}
    if not isinstance(sl, dict):
        r.add(doc.ref_of("spec_limits"), f"spec_limits: expected a mapping, got {sl!r}",
              "write one 'name: number' per limit under 'spec_limits:'")
    else:
        for key, v in sl.items():
            where = sl.ref_of(key) if isinstance(sl, MarkedDict) else doc.ref_of("spec_limits")
            if isinstance(v, dict):
                stated = _limit_with_conditions(r, str(key), v, where)
                if stated is not None:
                    limits[str(key)], conditions[str(key)] = stated
            elif isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                r.add(where, f"spec_limits.{key}: expected a number, got {v!r}",
                      "write the limit as a number in the unit its name states, or "
                      "{limit: <number>, <condition>: <number>, ...}")
            else:
                limits[str(key)] = float(v)
    if r.problems:
        raise UutFileError(r.problems)
    return UutSpec(model=model, serial=serial, width=width, height=height,
                   pixel_pitch_um=pitch, focal_length_mm=focal, f_number=f_number,
                   projection=projection, band_um=band, frame_rate_hz=rate, bit_depth=bits,
                   spec_limits=limits, spec_conditions=conditions, reference_px=reference)


def _reference_px(r: _Reader, fmt: MarkedDict | None, width: Any, height: Any
                  ) -> tuple[float, float] | None:
    """The optional boresight reference pixel [x, y] (x = column), inside the detector."""
    if fmt is None or "reference_px" not in fmt:
        return None
    v = fmt["reference_px"]
    ok = (isinstance(v, list) and len(v) == 2 and all(is_number(x) for x in v))
    if ok and width is not None and height is not None:
        ok = -0.5 <= float(v[0]) <= width - 0.5 and -0.5 <= float(v[1]) <= height - 0.5
    if not ok:
        r.add(fmt.ref_of("reference_px"), f"format.reference_px: expected [x, y] in pixels "
              f"inside the detector, got {v!r}",
              "x is the column, y the row, from the centre of the top-left pixel; leave it out "
              "for the detector's geometric centre")
        return None
    return float(v[0]), float(v[1])


def _limit_with_conditions(r: _Reader, key: str, entry: dict[str, Any], where: SourceRef
                           ) -> tuple[float, dict[str, float]] | None:
    """``{limit: 50, source_c: 30, background_c: 20}``: the limit and its stated conditions."""
    ok = True
    if "limit" not in entry:
        r.add(where, f"spec_limits.{key}: the mapping has no 'limit'",
              f"write {key}: {{limit: <number>, <condition>: <number>}}")
        return None
    numbers: dict[str, float] = {}
    for name, value in entry.items():
        at = entry.ref_of(name) if isinstance(entry, MarkedDict) else where
        if not is_number(value):
            r.add(at, f"spec_limits.{key}.{name}: expected a number, got {value!r}",
                  "conditions are numbers in the unit their name states (source_c: 30)")
            ok = False
            continue
        numbers[str(name)] = float(value)
    if not ok:
        return None
    limit = numbers.pop("limit")
    return limit, numbers


def spec_sources(path: str | Path) -> dict[str, SourceRef]:
    """Where each spec key of a UUT file is written (for messages naming its line)."""
    try:
        doc = load_yaml(path)
    except SourceError:
        return {}
    sl = doc.get("spec_limits") if isinstance(doc, MarkedDict) else None
    if not isinstance(sl, MarkedDict):
        return {}
    return {str(k): sl.key_ref(k) for k in sl}


def demo_uut_path() -> Path:
    """The demo UUT file shipped with the package."""
    return Path(__file__).resolve().parent.parent / "data" / "demo_uut.yaml"
