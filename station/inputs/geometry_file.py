"""The geometry file of a standalone analysis: what a frame captured elsewhere cannot tell us.

A frame from another lab arrives without a station file, a UUT file or a run folder. This small
YAML file states just enough to analyse it: the nominal camera, the collimator, the target in the
beam and the stage pose. Layout (see station/data/example_geometry.yaml)::

    uut:        {width, height, pixel_pitch_um, focal_length_mm, projection?, cx?, cy?, bit_depth?}
    collimator: {focal_length_mm}
    target:     {kind: pinhole_grid, rows, cols, pitch_mm, diameter_mm}   (as in a wheel slot)
                {kind: slanted_edge, angle_deg}                           (mtf)
                {kind: open_aperture}                                     (noise3d, badpixels)
    stage:      {az_deg?, el_deg?}                                        (optional, default 0)
    spec_limits: {max_distortion_percent: ..., ...}                       (optional)
    saturation_counts: ...                                                (optional)
    sitf_counts_per_k: ...        (optional: noise3d in mK)
    flat_temperatures_c: [cool, warm]   (optional: the flats' source temperatures, stated)

Every problem is reported at once with file:line and what to write instead.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from analysis.distortion import _SPEC_KEYS as DISTORTION_SPEC_KEYS
from analysis.geometry import PROJECTIONS, CameraGeometry
from analysis.badpixels import SPEC_KEYS as BAD_PIXEL_SPEC_KEYS
from analysis.mtf import SPEC_KEYS as MTF_SPEC_KEYS
from analysis.targets import (OpenAperture, PinholeGrid, SinglePinhole, SlantedEdge,
                              target_from_mapping)
from sequences.yamlsource import (MarkedDict, Problem, SourceError, SourceRef, is_number,
                                  load_yaml)

_TOP = ("uut", "collimator", "target", "stage", "spec_limits", "saturation_counts", "notes",
        "sitf_counts_per_k", "flat_temperatures_c")
_SPEC_KEYS = (*DISTORTION_SPEC_KEYS, *MTF_SPEC_KEYS, *BAD_PIXEL_SPEC_KEYS)
Target = PinholeGrid | SinglePinhole | SlantedEdge | OpenAperture
_UUT_REQUIRED = ("width", "height", "pixel_pitch_um", "focal_length_mm")
_UUT_KEYS = _UUT_REQUIRED + ("projection", "cx", "cy", "bit_depth", "model", "serial")
_STAGE_KEYS = ("az_deg", "el_deg")


class GeometryFileError(SourceError):
    """Every problem of one geometry file (a `ValueError`); `str()` gives one line per problem."""


@dataclass(frozen=True)
class GeometrySpec:
    """A validated geometry file: the nominal camera and the bench it was measured on."""

    path: Path
    nominal: CameraGeometry
    collimator_focal_mm: float
    target: Target
    az_deg: float = 0.0
    el_deg: float = 0.0
    spec: dict[str, float] = field(default_factory=dict)
    saturation: float | None = None
    sitf_counts_per_k: float | None = None
    flat_temperatures_c: tuple[float, ...] = ()

    @property
    def shape(self) -> tuple[int, int]:
        """(rows, cols) a frame must have."""
        return (int(self.nominal.height), int(self.nominal.width))


class _Reader:
    def __init__(self) -> None:
        self.problems: list[Problem] = []

    def add(self, where: SourceRef, message: str, hint: str = "") -> None:
        self.problems.append(Problem(where, message, hint))

    def unknown_keys(self, m: MarkedDict, allowed: tuple[str, ...], prefix: str) -> None:
        for key in m:
            if key not in allowed:
                close = difflib.get_close_matches(str(key), allowed, n=1)
                self.add(m.key_ref(key), f"{prefix}{key}: unknown key",
                         f"did you mean '{close[0]}'?" if close else
                         f"allowed keys are {', '.join(allowed)}")

    def section(self, doc: MarkedDict, name: str, hint: str, *, required: bool = True
                ) -> MarkedDict | None:
        if name not in doc:
            if required:
                self.add(doc.ref(), f"{name}: missing section", hint)
            return None
        sec = doc[name]
        if not isinstance(sec, MarkedDict):
            self.add(doc.ref_of(name), f"{name}: expected a mapping, got {sec!r}", hint)
            return None
        return sec

    def number(self, m: MarkedDict, key: str, path: str, *, required: bool = True,
               positive: bool = False, integer: bool = False) -> Any:
        if key not in m:
            if required:
                self.add(m.ref(), f"{path}: missing", f"add '{key}: <number>'")
            return None
        v = m[key]
        kind = "a whole number" if integer else "a number"
        if not is_number(v, integer=integer):
            self.add(m.ref_of(key), f"{path}: expected {kind}, got {v!r}", f"write {kind}")
            return None
        if positive and v <= 0:
            self.add(m.ref_of(key), f"{path}: must be above 0, got {v!r}")
            return None
        return int(v) if integer else float(v)


def _plain(value: Any) -> Any:
    """Marked YAML containers as plain dicts/lists (target_from_mapping checks exact types)."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_plain(v) for v in value]
    return getattr(value, "value", value)


def _uut(r: _Reader, sec: MarkedDict) -> tuple[CameraGeometry | None, float | None]:
    r.unknown_keys(sec, _UUT_KEYS, "uut.")
    width = r.number(sec, "width", "uut.width", positive=True, integer=True)
    height = r.number(sec, "height", "uut.height", positive=True, integer=True)
    pitch = r.number(sec, "pixel_pitch_um", "uut.pixel_pitch_um", positive=True)
    focal = r.number(sec, "focal_length_mm", "uut.focal_length_mm", positive=True)
    cx = r.number(sec, "cx", "uut.cx", required=False)
    cy = r.number(sec, "cy", "uut.cy", required=False)
    bits = r.number(sec, "bit_depth", "uut.bit_depth", required=False, positive=True,
                    integer=True)
    if bits is not None and bits > 32:
        r.add(sec.ref_of("bit_depth"), f"uut.bit_depth: {bits} is not a camera bit depth",
              "write the ADC depth, e.g. 14")
        bits = None
    projection = sec.get("projection", "rectilinear")
    if projection not in PROJECTIONS:
        r.add(sec.ref_of("projection"), f"uut.projection: {projection!r} is not known",
              f"use one of {', '.join(PROJECTIONS)}")
        projection = None
    if None in (width, height, pitch, focal, projection):
        return None, None
    saturation = float(2 ** bits - 1) if bits is not None else None
    return CameraGeometry(width=width, height=height, pixel_pitch_um=pitch,
                          focal_length_mm=focal, projection=projection, cx=cx, cy=cy), saturation


def _target(r: _Reader, doc: MarkedDict, base_dir: Path) -> Target | None:
    sec = r.section(doc, "target", "describe the target, e.g. target: {kind: pinhole_grid, "
                    "rows: 11, cols: 15, pitch_mm: 12.0, diameter_mm: 1.0}")
    if sec is None:
        return None
    try:
        target = target_from_mapping(_plain(sec), base_dir)
    except ValueError as exc:
        for line in str(exc).splitlines():
            key = line.split(":", 1)[0].strip()
            where = sec.key_ref(key) if key in sec else sec.ref()
            r.add(where, f"target.{line}")
        return None
    if not isinstance(target, (PinholeGrid, SinglePinhole, SlantedEdge, OpenAperture)):
        r.add(sec.ref_of("kind"), f"target.kind: {target.kind} is not analysed from a frame",
              "use pinhole_grid (distortion), slanted_edge (mtf) or open_aperture (noise3d, "
              "badpixels)")
        return None
    return target


def load_geometry(path: str | Path) -> GeometrySpec:
    """Read and validate a geometry file; raise `GeometryFileError` listing every problem."""
    path = Path(path)
    try:
        doc = load_yaml(path)
    except SourceError as exc:
        raise GeometryFileError(exc.problems) from None
    if not isinstance(doc, MarkedDict):
        raise GeometryFileError([Problem(doc.ref(), "a geometry file must be a mapping of keys",
                                         "start from station/data/example_geometry.yaml")])
    r = _Reader()
    r.unknown_keys(doc, _TOP, "")
    nominal, saturation = None, None
    uut = r.section(doc, "uut", "add 'uut:' with width, height, pixel_pitch_um, focal_length_mm")
    if uut is not None:
        nominal, saturation = _uut(r, uut)
    focal = None
    coll = r.section(doc, "collimator", "add 'collimator: {focal_length_mm: <number>}'")
    if coll is not None:
        r.unknown_keys(coll, ("focal_length_mm",), "collimator.")
        focal = r.number(coll, "focal_length_mm", "collimator.focal_length_mm", positive=True)
    target = _target(r, doc, path.parent)
    az = el = 0.0
    stage = r.section(doc, "stage", "write 'stage: {az_deg: 0.0, el_deg: 0.0}'", required=False)
    if stage is not None:
        r.unknown_keys(stage, _STAGE_KEYS, "stage.")
        az = r.number(stage, "az_deg", "stage.az_deg", required=False) or 0.0
        el = r.number(stage, "el_deg", "stage.el_deg", required=False) or 0.0
    spec: dict[str, float] = {}
    limits = r.section(doc, "spec_limits", "write one 'name: number' per limit", required=False)
    if limits is not None:
        r.unknown_keys(limits, _SPEC_KEYS, "spec_limits.")
        for key in limits:
            if key in _SPEC_KEYS:
                value = r.number(limits, key, f"spec_limits.{key}")
                if value is not None:
                    spec[str(key)] = value
    if "saturation_counts" in doc:
        saturation = r.number(doc, "saturation_counts", "saturation_counts", positive=True)
    sitf = (r.number(doc, "sitf_counts_per_k", "sitf_counts_per_k", positive=True)
            if "sitf_counts_per_k" in doc else None)
    temps: tuple[float, ...] = ()
    if "flat_temperatures_c" in doc:
        raw = doc["flat_temperatures_c"]
        if (isinstance(raw, list) and len(raw) == 2
                and all(is_number(getattr(v, "value", v)) for v in raw)):
            temps = tuple(float(getattr(v, "value", v)) for v in raw)
        else:
            r.add(doc.ref_of("flat_temperatures_c"), f"flat_temperatures_c: expected two "
                  f"numbers [cool, warm], got {_plain(raw)!r}", "write e.g. [26.0, 34.0]")
    if r.problems or nominal is None or focal is None or target is None:
        if not r.problems:
            r.add(doc.ref(), "the geometry file is incomplete")
        raise GeometryFileError(r.problems)
    return GeometrySpec(path=path, nominal=nominal, collimator_focal_mm=focal, target=target,
                        az_deg=az, el_deg=el, spec=spec, saturation=saturation,
                        sitf_counts_per_k=sitf, flat_temperatures_c=temps)


def example_geometry_path() -> Path:
    """The example geometry file shipped with the package (the demo bench and camera)."""
    return Path(__file__).resolve().parent.parent / "data" / "example_geometry.yaml"
