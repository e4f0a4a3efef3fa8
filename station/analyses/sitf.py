"""SiTF as an analysis: signal against the absolute source temperature, following Planck.

An open-aperture camera sees the source, so the abscissa is the source temperature (not source
minus a drifting reference). The signal (mean over the good pixels; bad pixels from the coolest
and warmest flat when they were kept as stacks) is fitted as ``S = a + b L_band(T)``
(analysis.netd), so the SiTF ``b dL/dT`` is stated at a temperature: the spec's NETD source
temperature when the UUT file gives one, else the middle of the flats. The SiTF at each flat's
temperature is listed too (it rises about 1 %/K in the long-wave band).
"""

from __future__ import annotations

from analysis.netd import fit_sitf_radiance
from sequences.plansteps import AnalyzeStep
from station.analyses.common import write_result
from station.analyses.flats import bad_pixels_of, read_flats, spec_source_c
from station.analyses.registry import (Analysis, AnalysisContext, AnalysisFailed,
                                       AnalysisOutcome, AnalysisSite, CaptureNeed)

NEED = CaptureNeed(targets=frozenset({"open_aperture"}), keep=frozenset({"average", "both"}),
                   first_keep=frozenset({"average", "both"}), min_captures=2,
                   why="flat fields at two or more source temperatures")


def run(site: AnalysisSite, step: AnalyzeStep, context: AnalysisContext) -> AnalysisOutcome:
    """SiTF over the captures; writes sitf.json."""
    uut = context.uut
    flats = read_flats(site, step.instances)
    mask = None
    try:
        mask = bad_pixels_of(site, flats, "sitf").mask
    except AnalysisFailed:
        pass  # averages only, or one temperature: no mask (the fit below says what is wrong)
    signals = []
    for f in flats:
        image = site.load_average(f.name)
        signals.append(float(image[~mask].mean() if mask is not None else image.mean()))
    temps = [f.source_c for f in flats]
    at_c = spec_source_c(uut.spec_conditions, "netd_mk")
    if at_c is None:
        at_c = 0.5 * (min(temps) + max(temps))
    try:
        fit = fit_sitf_radiance(temps, signals, [1.0] * len(temps), uut.band_um)
    except ValueError as exc:
        raise AnalysisFailed(f"sitf: {exc}") from None
    sitf, sigma = fit.sitf_at(at_c)
    result = {"sitf_counts_per_k": sitf, "sitf_sigma_counts_per_k": sigma, "at_source_c": at_c,
              "model": "S = a + b L_band(T_source), open aperture",
              "intercept_counts": fit.intercept_counts,
              "counts_per_radiance": fit.counts_per_radiance,
              "source_c": temps, "reference_c": [f.reference_c for f in flats],
              "signal_counts": signals, "residuals_counts": fit.residuals().tolist(),
              "sitf_at_each_flat_counts_per_k": [fit.sitf_at(t)[0] for t in temps],
              "bad_pixels_excluded": int(mask.sum()) if mask is not None else 0,
              "band_um": list(uut.band_um)}
    path = write_result(site, "sitf.json", result)
    return AnalysisOutcome({"sitf_counts_per_k": sitf, "at_source_c": at_c}, files=(path,))


ANALYSIS = Analysis(
    name="sitf",
    description="signal transfer function: counts per kelvin of source temperature, stated "
                "at a temperature (radiance-linear fit)",
    run=run,
    needs=lambda options: NEED,
    result_files=("sitf.json",),
)
