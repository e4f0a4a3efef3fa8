"""Uniformity as an analysis: two-point gain and offset non-uniformity (analysis.uniformity)
from the coolest and warmest flats, bad pixels left out.

One flat's spread over its total counts mixes offset and gain patterns and falls with the
source temperature although the pattern is constant; two flats separate them. The offset part
is also given in kelvin of source temperature through the SiTF at the cool flat's temperature
(radiance-linear fit over all the step's flats, analysis.netd). The temporal noise left in each
mean frame is removed, so only the fixed pattern is reported.
"""

from __future__ import annotations

from analysis.netd import measure_netd
from analysis.stack_stats import temporal_mean_var
from analysis.uniformity import SPEC_KEYS, two_point_uniformity
from sequences.plansteps import AnalyzeStep
from station.analyses.common import judge_spec, write_result
from station.analyses.flats import bad_pixels_of, coolest_and_warmest, read_flats
from station.analyses.registry import (Analysis, AnalysisContext, AnalysisFailed,
                                       AnalysisOutcome, AnalysisSite, CaptureNeed)

NEED = CaptureNeed(targets=frozenset({"open_aperture"}), keep=frozenset({"stack", "both"}),
                   first_keep=frozenset({"stack", "both"}), min_captures=2,
                   why="flat fields at two source temperatures, kept as stacks")


def run(site: AnalysisSite, step: AnalyzeStep, context: AnalysisContext) -> AnalysisOutcome:
    """Gain and offset non-uniformity; writes uniformity.json with its verdicts."""
    uut = context.uut
    flats = read_flats(site, step.instances)
    cool, warm = coolest_and_warmest(flats, "uniformity")
    bad = bad_pixels_of(site, flats, "uniformity")
    stacks = {f.name: site.load_stack(f.name) for f in flats}
    stats = {f.name: temporal_mean_var(stacks[f.name]) for f in (cool, warm)}
    good = ~bad.mask
    residual = tuple(float(stats[f.name][1][good].mean()) / stacks[f.name].shape[0]
                     for f in (cool, warm))
    try:
        sitf = measure_netd([f.source_c for f in flats], [stacks[f.name] for f in flats],
                            uut.band_um, at_c=cool.source_c, bad_pixel_mask=bad.mask
                            ).sitf_counts_per_k
        u = two_point_uniformity(stats[cool.name][0], stats[warm.name][0],
                                 bad.mask, sitf, temporal_variance_of_means=residual,
                                 conditions={"cool_c": round(cool.source_c, 4),
                                             "warm_c": round(warm.source_c, 4),
                                             "cool_capture": cool.name,
                                             "warm_capture": warm.name,
                                             "sitf_at_cool_counts_per_k": sitf,
                                             "bad_pixels_excluded": bad.count})
    except ValueError as exc:
        raise AnalysisFailed(f"uniformity: {exc}") from None
    # std of N pixels: relative uncertainty 1/sqrt(2 (N - 1)) (normal sample; common practice)
    rel = 1.0 / (2.0 * max(u.pixels_used - 1, 1)) ** 0.5
    values = {"max_gain_nonuniformity_percent": u.gain_nonuniformity_percent,
              "max_offset_nonuniformity_k": u.offset_nonuniformity_k}
    measured = {"cool_c": round(cool.source_c, 4), "warm_c": round(warm.source_c, 4),
                "pixels_used": u.pixels_used}
    verdicts = []
    for key, spec in SPEC_KEYS.items():
        value = values.get(key)
        if value is None:
            continue
        verdict = judge_spec(uut, spec, value, rel * value, measured)
        if verdict is not None:
            verdicts.append(verdict)
    result = u.to_dict()
    result["method"] = "two-point: gain from warm minus cool, offset from the cool flat"
    result["verdicts"] = [v.to_dict() for v in verdicts]
    path = write_result(site, "uniformity.json", result)
    summary = {"gain_nonuniformity_percent": u.gain_nonuniformity_percent,
               "offset_nonuniformity_counts": u.offset_nonuniformity_counts,
               "offset_nonuniformity_k": u.offset_nonuniformity_k}
    return AnalysisOutcome(summary, tuple(verdicts), (path,))


ANALYSIS = Analysis(
    name="uniformity",
    description="two-point gain and offset non-uniformity of flat fields, bad pixels excluded",
    run=run,
    needs=lambda options: NEED,
    spec_keys=dict(SPEC_KEYS),
    result_files=("uniformity.json",),
)
