"""Uniformity as an analysis: non-uniformity and bad pixels of each flat field."""

from __future__ import annotations

import math

from analysis.uniformity import uniformity
from analysis.verdicts import SpecKey, Verdict
from sequences.plansteps import AnalyzeStep
from station.analyses.common import judge_spec, write_result
from station.analyses.registry import (Analysis, AnalysisContext, AnalysisOutcome, AnalysisSite,
                                       CaptureNeed)

BAD_PIXEL_PERCENT = SpecKey("max_bad_pixel_percent", "bad pixels", "%", "max",
                            "share of pixels deviating from their 3x3 local median by more than "
                            "6 robust sigma, on the worst flat field")
NONUNIFORMITY_PERCENT = SpecKey("max_nonuniformity_percent", "non-uniformity", "%", "max",
                                "spatial standard deviation over mean signal of an averaged "
                                "flat field, bad pixels excluded; the worst flat field")

NEED = CaptureNeed(targets=frozenset({"open_aperture"}), keep=frozenset({"average", "both"}),
                   first_keep=frozenset({"average", "both"}), why="averaged flat fields")


def run(site: AnalysisSite, step: AnalyzeStep, context: AnalysisContext) -> AnalysisOutcome:
    """Non-uniformity and bad pixels of each capture's averaged frame; writes uniformity.json."""
    out: dict[str, dict[str, float | int]] = {}
    pixels = 0
    for name in step.instances:
        image = site.load_average(name)
        pixels = image.size
        u = uniformity(image, dark_counts=0.0)
        out[name] = {"nonuniformity_percent": u.nonuniformity_percent,
                     "bad_pixels": u.bad_pixels, "bad_pixel_fraction": u.bad_pixel_fraction,
                     "mean_counts": u.mean_counts}
    worst_nu = max(v["nonuniformity_percent"] for v in out.values())
    worst_bad = max(float(v["bad_pixel_fraction"]) for v in out.values())
    verdicts: list[Verdict] = []
    # binomial standard error of a share counted over the frame's pixels (common practice)
    bad_sigma = 100.0 * math.sqrt(max(worst_bad * (1 - worst_bad), 1.0 / pixels) / pixels)
    for key, value, sigma in ((BAD_PIXEL_PERCENT, 100.0 * worst_bad, bad_sigma),
                              (NONUNIFORMITY_PERCENT, worst_nu, 0.0)):
        verdict = judge_spec(context.uut, key, value, sigma, {"captures": len(out)})
        if verdict is not None:
            verdicts.append(verdict)
    # uniformity.json keeps its shape (one entry per capture); the verdicts go to the journal
    # and results/verdicts.json
    path = write_result(site, "uniformity.json", out)
    return AnalysisOutcome({"worst_nonuniformity_percent": worst_nu, "captures": len(out)},
                           tuple(verdicts), (path,))


ANALYSIS = Analysis(
    name="uniformity",
    description="spatial non-uniformity and bad pixels of averaged flat fields",
    run=run,
    needs=lambda options: NEED,
    spec_keys={k.key: k for k in (BAD_PIXEL_PERCENT, NONUNIFORMITY_PERCENT)},
    result_files=("uniformity.json",),
)
