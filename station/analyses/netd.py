"""NETD as an analysis: temporal noise of the first capture's stack over the SiTF of all of them.

The spec key ``netd_mk`` names NETD at a stated source and background temperature; the verdict
carries the conditions the stack was actually taken at (source and reference readings), and
``check`` warns when the recipe's planned difference differs from the spec's.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np

from analysis.sitf import central_mean, fit_sitf, netd
from analysis.verdicts import SpecKey
from sequences.plansteps import AnalyzeStep, BlackbodyStep, CaptureStep, PlanStep
from station.analyses.common import blackbody_reading, judge_spec, write_result
from station.analyses.registry import (Analysis, AnalysisContext, AnalysisFailed,
                                       AnalysisOutcome, AnalysisSite, CaptureNeed)

NETD_MK = SpecKey("netd_mk", "NETD", "mK", "max",
                  "temporal noise over the SiTF, at the stated source and background "
                  "temperatures", conditions=("source_c", "background_c"))

NEED = CaptureNeed(targets=frozenset({"open_aperture"}), keep=frozenset({"average", "both"}),
                   first_keep=frozenset({"stack", "both"}), min_captures=2,
                   why="flat fields at two or more differences, the first kept as a stack")


def _slope_sigma(deltas: Sequence[float], signals: Sequence[float]) -> float:
    """Standard error of the least-squares slope (0 when two points leave no residual dof)."""
    x = np.asarray(deltas, float)
    if x.size < 3:
        return 0.0
    _, cov = np.polyfit(x, np.asarray(signals, float), 1, cov=True)
    return float(math.sqrt(max(cov[0, 0], 0.0)))


def run(site: AnalysisSite, step: AnalyzeStep, context: AnalysisContext) -> AnalysisOutcome:
    """NETD from the first capture's stack; writes netd.json with its verdict."""
    names = step.instances
    readings = [blackbody_reading(site.capture_info(n), n) for n in names]
    deltas = [s - r for s, r in readings]
    signals = [central_mean(site.load_average(n)) for n in names]
    try:
        sitf = fit_sitf(deltas, signals)
        stack = site.load_stack(names[0])
        noise = netd(stack, sitf.sitf_counts_per_k)
    except ValueError as exc:
        raise AnalysisFailed(f"netd: {exc}") from None
    netd_mk = 1000.0 * noise.netd_k
    # 1-sigma: the SiTF slope's standard error and the chi-square spread of the mean variance
    # over frames x pixels (var of s^2 is 2 s^4 / (n - 1): common practice for normal noise).
    pixels = stack.shape[1] * stack.shape[2]
    rel_noise = 0.5 * math.sqrt(2.0 / ((noise.frames - 1) * pixels))
    rel_sitf = _slope_sigma(deltas, signals) / abs(sitf.sitf_counts_per_k)
    sigma_mk = netd_mk * math.hypot(rel_noise, rel_sitf)
    source_c, reference_c = readings[0]
    measured = {"source_c": round(source_c, 4), "background_c": round(reference_c, 4),
                "difference_k": round(source_c - reference_c, 4), "frames": noise.frames,
                "f_number": context.uut.f_number}
    verdict = judge_spec(context.uut, NETD_MK, netd_mk, sigma_mk, measured)
    result = {"netd_k": noise.netd_k, "netd_mk": netd_mk, "netd_sigma_mk": sigma_mk,
              "temporal_noise_counts": noise.temporal_noise_counts,
              "sitf_counts_per_k": sitf.sitf_counts_per_k, "frames": noise.frames,
              "capture": names[0], "f_number": context.uut.f_number, "conditions": measured,
              "verdicts": [verdict.to_dict()] if verdict else []}
    if verdict is not None:
        result["passed"] = verdict.passed
    path = write_result(site, "netd.json", result)
    summary = {"netd_mk": netd_mk, "netd_sigma_mk": sigma_mk}
    return AnalysisOutcome(summary, (verdict,) if verdict else (), (path,))


def planned(step: AnalyzeStep, steps: Sequence[PlanStep]) -> Mapping[str, float]:
    """The conditions the plan sets for the first capture: its blackbody difference or
    absolute setpoint (the background is the lab's reference plate, not set by a recipe)."""
    if not step.instances:
        return {}
    setpoint: BlackbodyStep | None = None
    for s in steps:
        if isinstance(s, BlackbodyStep):
            setpoint = s
        if isinstance(s, CaptureStep) and s.name == step.instances[0]:
            break
    if setpoint is None:
        return {}
    if setpoint.mode == "absolute":
        return {"source_c": setpoint.setpoint}
    return {"difference_k": setpoint.setpoint}


ANALYSIS = Analysis(
    name="netd",
    description="noise-equivalent temperature difference from a stack over the SiTF",
    run=run,
    needs=lambda options: NEED,
    spec_keys={NETD_MK.key: NETD_MK},
    result_files=("netd.json",),
    planned_conditions=planned,
)
