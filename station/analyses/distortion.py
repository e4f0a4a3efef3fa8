"""Distortion as an analysis: grid mode (one frame of the pinhole grid) or scan mode (one pinhole
at every stage pose of a scan). The computation is analysis.distortion_frames; this module only
loads the captures, checks they are what the mode needs, writes the files and turns the result's
verdicts into the common Verdict.

The spec keys are declared from analysis.distortion's own table (SpecKey objects, or the older
key -> description table whose unit is read from the key's suffix), so a key added or redefined
there is declared here with no edit.
"""

from __future__ import annotations

import inspect
from collections.abc import Mapping

import numpy as np

from analysis import distortion as _distortion
from analysis.distortion_frames import distortion_from_grid_frame, distortion_from_scan_frames
from analysis.results_io import (distortion_summary, write_distortion_results,
                                 write_undistortion_map)
from analysis.targets import PinholeGrid, SinglePinhole
from analysis.verdicts import SpecKey, Verdict
from sequences.plansteps import AnalyzeStep, OptionValue
from station.analyses.common import pose_deg
from station.analyses.registry import (Analysis, AnalysisContext, AnalysisFailed,
                                       AnalysisOutcome, AnalysisSite, CaptureNeed, OptionSpec)

_UNITS = (("_percent", "%"), ("_px", "px"), ("_deg", "deg"))


def _spec_key(key: str, text: object) -> SpecKey:
    if isinstance(text, SpecKey):
        return text
    unit = next((u for suffix, u in _UNITS if key.endswith(suffix)), "")
    sense = "min" if key.startswith("min_") else "max"
    return SpecKey(key, str(text).split(",")[0], unit, sense, str(text))


_DECLARED = (getattr(_distortion, "DISTORTION_SPEC_KEYS", None)
             or getattr(_distortion, "_SPEC_KEYS", {}))
SPEC_KEYS: Mapping[str, SpecKey] = {k: _spec_key(k, v) for k, v in _DECLARED.items()}

OPTIONS = {"mode": OptionSpec("mode", "choice", "grid", "grid: one frame of the pinhole grid; "
                              "scan: one pinhole at every pose of a stage scan",
                              choices=("grid", "scan"))}

GRID_NEED = CaptureNeed(targets=frozenset({"pinhole_grid"}), keep=frozenset({"average", "both"}),
                        first_keep=frozenset({"average", "both"}), why="grid mode")
SCAN_NEED = CaptureNeed(targets=frozenset({"single_pinhole"}), keep=frozenset({"average", "both"}),
                        first_keep=frozenset({"average", "both"}), min_captures=6,
                        angular_axes=True, why="scan mode")


SHORT_SUMMARY = ("max_distortion_percent", "classification", "boresight_offset_px", "skew_deg",
                 "n_defects", "defect_labels")
SHORT_MODEL = ("k1", "k2", "k3", "p1", "p2", "fx_px", "fy_px", "cx_px", "cy_px")


def needs(options: Mapping[str, OptionValue]) -> CaptureNeed:
    return SCAN_NEED if options.get("mode") == "scan" else GRID_NEED


def _as_verdict(item: object) -> Verdict | None:
    """The common Verdict of one of the result's verdicts (either kind the analysis gives)."""
    if isinstance(item, Verdict):
        return item
    name = getattr(item, "name", None)
    if name is None or name not in SPEC_KEYS:
        return None
    # The result gives no uncertainty for this figure: judged with none stated (sigma 0).
    return SPEC_KEYS[name].judge(abs(float(getattr(item, "value"))), 0.0,
                                 float(getattr(item, "limit")), {"uncertainty": "not stated"})


def _plots(result: object, site: AnalysisSite, context: AnalysisContext) -> tuple:
    from analysis.distortion_plots import write_distortion_plots  # SVG writer: load on use

    extra = {"uut_serial": context.uut.serial, "run_id": site.run_id,
             "date": context.date_utc}
    accepted = inspect.signature(write_distortion_plots).parameters
    kwargs = {k: v for k, v in extra.items() if k in accepted}
    written = write_distortion_plots(result, site.plots_dir, **kwargs)  # type: ignore[arg-type]
    return tuple(written.values()) if isinstance(written, Mapping) else tuple(written)


def run(site: AnalysisSite, step: AnalyzeStep, context: AnalysisContext) -> AnalysisOutcome:
    """Grid or scan distortion from the step's captures; writes results and plots."""
    mode = ANALYSIS.options_of(step)["mode"]
    uut, station = context.uut, context.station
    nominal = uut.nominal_geometry()
    spec = {k: v for k, v in uut.spec_limits.items() if k in SPEC_KEYS}
    saturation = float(2 ** uut.bit_depth - 1)
    try:
        if mode == "grid":
            name = step.instances[-1]
            info = site.capture_info(name)
            target = station.target_named(str(info.get("target") or ""))
            if not isinstance(target, PinholeGrid):
                raise AnalysisFailed(f"distortion (grid) needs a pinhole grid in the beam for "
                                     f"capture {name}; it had {info.get('target')!r}")
            az, el = pose_deg(info, name, station)
            labels = [f"r{r}c{c}" for r, c in target.labels()]
            result = distortion_from_grid_frame(site.load_average(name), target.points_mm(),
                                                station.collimator_focal_mm, nominal,
                                                labels=labels, az_deg=az, el_deg=el, spec=spec,
                                                saturation=saturation)
        else:
            infos = [site.capture_info(n) for n in step.instances]
            target = station.target_named(str(infos[0].get("target") or "")) if infos else None
            if not isinstance(target, SinglePinhole):
                raise AnalysisFailed("distortion (scan) needs the single pinhole in the beam")
            poses = np.array([pose_deg(i, n, station) for i, n in zip(infos, step.instances)])
            images = [site.load_average(n) for n in step.instances]
            result = distortion_from_scan_frames(images, poses, station.collimator_focal_mm,
                                                 nominal, pinhole_mm=(target.x_mm, target.y_mm),
                                                 labels=list(step.instances), spec=spec,
                                                 saturation=saturation)
    except ValueError as exc:
        raise AnalysisFailed(f"distortion ({mode}): {exc}") from None
    files = list(write_distortion_results(result, site.results_dir))
    files.append(write_undistortion_map(result, site.results_dir))
    files.extend(_plots(result, site, context))
    for path in files:
        site.register(path)
    written = distortion_summary(result)
    summary, model = written["summary"], written["model"]
    verdicts = tuple(v for v in map(_as_verdict, getattr(result, "verdicts", ())) if v)
    short = {k: summary[k] for k in SHORT_SUMMARY if k in summary}
    short.update({k: model[k] for k in SHORT_MODEL if k in model})
    return AnalysisOutcome(short, verdicts, tuple(files))


ANALYSIS = Analysis(
    name="distortion",
    description="lens distortion, boresight and roll from a pinhole grid or a pinhole scan",
    run=run,
    options=OPTIONS,
    needs=needs,
    spec_keys=SPEC_KEYS,
    result_files=("distortion.json", "distortion_points.csv", "undistortion_map.tif"),
)
