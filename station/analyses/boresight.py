"""Boresight as an analysis: the on-axis pinhole's centroid in each capture, turned into the stage
pose at which the reference pixel looks along the collimator axis (analysis.boresight). Two or
more captures give the boresight shift and its spread; an align step earlier in the run adds its
converged pose (results/alignment.json) as a second, independent path, with their agreement.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from analysis.boresight import (BORESIGHT_SPEC_KEYS, BoresightMeasurement, PinholeNotFound,
                                boresight_shift, measure_boresight)
from sequences.plansteps import AnalyzeStep, OptionValue
from station.analyses.common import blackbody_reading, judge_spec, pose_deg, write_result
from station.analyses.geometry_common import REFERENCE_OPTION, reference_px, step_output
from station.analyses.registry import (Analysis, AnalysisContext, AnalysisFailed,
                                       AnalysisOutcome, AnalysisSite, CaptureNeed, OptionSpec)

NEED = CaptureNeed(targets=frozenset({"single_pinhole"}), keep=frozenset({"average", "both"}),
                   first_keep=frozenset({"average", "both"}), min_captures=1,
                   why="the single pinhole on the collimator axis")


def _measure(site: AnalysisSite, name: str, context: AnalysisContext,
             reference: tuple[float, float], options: Mapping[str, OptionValue]
             ) -> BoresightMeasurement:
    info = site.capture_info(name)
    pose = pose_deg(info, name, context.station)
    try:
        return measure_boresight(site.load_average(name), context.uut.nominal_geometry(), pose,
                                 reference_px=reference,
                                 saturation=float(context.uut.full_scale_counts),
                                 model_scale_sigma_rel=float(options["focal_tolerance_percent"])
                                 / 100.0,
                                 model_roll_sigma_deg=float(options["roll_tolerance_deg"]),
                                 label=name)
    except PinholeNotFound as exc:
        raise AnalysisFailed(f"boresight, capture {name}: {exc}") from None


def _alignment_path(site: AnalysisSite) -> dict[str, object] | None:
    data = step_output(site, "alignment.json")
    if not data or not data.get("converged"):
        return None
    az, el = (float(v) for v in data["boresight_deg"])
    saz, sel = (float(v) for v in data["sigma_deg"])
    return {"boresight_deg": [az, el], "sigma_deg": [saz, sel],
            "boresight_mrad": [math.radians(az) * 1e3, math.radians(el) * 1e3],
            "sigma_mrad": [math.radians(saz) * 1e3, math.radians(sel) * 1e3]}


def run(site: AnalysisSite, step: AnalyzeStep, context: AnalysisContext) -> AnalysisOutcome:
    """Boresight of every capture; shift and spread when there are several; verdicts."""
    options = ANALYSIS.options_of(step)
    reference = reference_px(options["reference"], context.uut)
    ms = [_measure(site, n, context, reference, options) for n in step.instances]
    shift = boresight_shift(ms) if len(ms) >= 2 else None
    worst = max(ms, key=lambda m: m.error_mrad)
    try:
        source_c, reference_c = blackbody_reading(site.capture_info(worst.label), worst.label)
        measured: dict[str, object] = {"blackbody_difference_k": round(source_c - reference_c, 3)}
    except AnalysisFailed:
        measured = {}
    measured.update({"reference_px": list(reference), "capture": worst.label})
    verdicts = []
    v = judge_spec(context.uut, BORESIGHT_SPEC_KEYS["max_boresight_error_mrad"],
                   worst.error_mrad, worst.error_sigma_mrad, measured)
    if v is not None:
        verdicts.append(v)
    if shift is not None:
        v = judge_spec(context.uut, BORESIGHT_SPEC_KEYS["max_boresight_shift_mrad"],
                       shift.max_shift_mrad, shift.sigma_mrad,
                       {"measurements": shift.count, "reference_px": list(reference)})
        if v is not None:
            verdicts.append(v)
    result: dict[str, object] = {"reference_px": list(reference),
                                 "measurements": [m.to_dict() for m in ms],
                                 "shift": shift.to_dict() if shift else None}
    aligned = _alignment_path(site)
    if aligned is not None:
        # Agreement of the two paths: difference over its combined 1-sigma, per axis.
        mean = np.mean([m.boresight_mrad for m in ms], axis=0)
        sig = np.sqrt(np.mean([np.square(m.sigma_mrad) for m in ms], axis=0) / len(ms))
        diff = mean - np.array(aligned["boresight_mrad"])
        comb = np.hypot(sig, np.array(aligned["sigma_mrad"]))
        aligned["difference_mrad"] = diff.tolist()
        aligned["difference_sigmas"] = (diff / comb).tolist()
        result["alignment"] = aligned
    files = [write_result(site, "boresight.json", result)]
    files.append(_plot(site, ms, aligned, context))
    site.register(files[-1])
    summary = {"boresight_mrad": list(ms[0].boresight_mrad), "sigma_mrad": list(ms[0].sigma_mrad),
               "error_mrad": worst.error_mrad, "captures": len(ms)}
    if shift is not None:
        summary["shift_mrad"] = shift.max_shift_mrad
    if aligned is not None:
        summary["alignment_difference_sigmas"] = aligned["difference_sigmas"]
    return AnalysisOutcome(summary, tuple(verdicts), tuple(files))


def _plot(site: AnalysisSite, ms: list[BoresightMeasurement], aligned: Mapping | None,
          context: AnalysisContext):
    from analysis.geometry_plots import plot_boresight_scatter

    points = [m.boresight_mrad for m in ms]
    sigmas = [m.sigma_mrad for m in ms]
    labels = [m.label for m in ms]
    if aligned is not None:
        points.append(tuple(aligned["boresight_mrad"]))
        sigmas.append(tuple(aligned["sigma_mrad"]))
        labels.append("alignment (converged pose)")
    limit = context.uut.spec_limits.get("max_boresight_error_mrad")
    return plot_boresight_scatter(points, sigmas, labels, limit,
                                  site.plot_path("boresight_scatter.svg"),
                                  title=f"Boresight of {context.uut.serial}")


def needs(options: Mapping[str, OptionValue]) -> CaptureNeed:
    return NEED


ANALYSIS = Analysis(
    name="boresight",
    description="where the UUT looks: the on-axis pinhole against the reference pixel, as stage "
                "angles through the UUT model; shift between captures",
    run=run,
    options={"reference": REFERENCE_OPTION,
             "focal_tolerance_percent": OptionSpec(
                 "focal_tolerance_percent", "number", 1.0,
                 "1-sigma of the UUT file's focal length, %: a capture far from the aligned pose "
                 "is converted through it", minimum=0.0),
             "roll_tolerance_deg": OptionSpec(
                 "roll_tolerance_deg", "number", 0.25,
                 "1-sigma of the UUT's mounting roll, deg (the UUT file assumes none)",
                 minimum=0.0)},
    needs=needs,
    spec_keys=BORESIGHT_SPEC_KEYS,
    result_files=("boresight.json",),
)
