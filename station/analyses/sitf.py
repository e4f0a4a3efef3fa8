"""SiTF as an analysis: the slope of the central signal against the blackbody difference."""

from __future__ import annotations

from analysis.sitf import central_mean, fit_sitf
from sequences.plansteps import AnalyzeStep
from station.analyses.common import blackbody_reading, write_result
from station.analyses.registry import (Analysis, AnalysisContext, AnalysisFailed,
                                       AnalysisOutcome, AnalysisSite, CaptureNeed)

NEED = CaptureNeed(targets=frozenset({"open_aperture"}), keep=frozenset({"average", "both"}),
                   first_keep=frozenset({"average", "both"}), min_captures=2,
                   why="flat fields at two or more blackbody differences")


def run(site: AnalysisSite, step: AnalyzeStep, context: AnalysisContext) -> AnalysisOutcome:
    """SiTF over the captures (one per blackbody difference); writes sitf.json."""
    deltas = []
    for name in step.instances:
        source_c, reference_c = blackbody_reading(site.capture_info(name), name)
        deltas.append(source_c - reference_c)
    signals = [central_mean(site.load_average(n)) for n in step.instances]
    try:
        sitf = fit_sitf(deltas, signals)
    except ValueError as exc:
        raise AnalysisFailed(f"sitf: {exc}") from None
    result = {"sitf_counts_per_k": sitf.sitf_counts_per_k,
              "intercept_counts": sitf.intercept_counts, "r_squared": sitf.r_squared,
              "delta_t_k": list(sitf.delta_t_k), "signal_counts": list(sitf.signal_counts)}
    path = write_result(site, "sitf.json", result)
    return AnalysisOutcome({k: result[k] for k in ("sitf_counts_per_k", "r_squared")},
                           files=(path,))


ANALYSIS = Analysis(
    name="sitf",
    description="signal transfer function: counts per kelvin of blackbody difference",
    run=run,
    needs=lambda options: NEED,
    result_files=("sitf.json",),
)
