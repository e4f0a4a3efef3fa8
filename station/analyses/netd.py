"""NETD as an analysis: the signable method of analysis.netd over the step's flat fields.

SiTF is fitted against the absolute source temperature (an open-aperture camera sees the
source), following Planck's curvature, and evaluated at the spec's source temperature
(``netd_mk: {source_c: ...}`` in the UUT file; without one, at the first capture's source
temperature); the noise is taken at that temperature from the flats that bracket it; bad pixels
(from the coolest and warmest flat, analysis.badpixels) are left out of signal and noise. The
result states every condition and the uncertainty budget. ``check`` warns when the recipe's flats
cannot bracket the spec's source temperature (station/analyses/spec_check.py).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

from analysis.netd import SPEC_KEYS, measure_netd
from sequences.plansteps import AnalyzeStep, BlackbodyStep, CaptureStep, PlanStep
from station.analyses.common import judge_spec, write_result
from station.analyses.flats import bad_pixels_of, read_flats, source_sigma_k, spec_source_c
from station.analyses.registry import (Analysis, AnalysisContext, AnalysisFailed,
                                       AnalysisOutcome, AnalysisSite, CaptureNeed)
from station.analyses.tables import write_csv

NETD_MK = SPEC_KEYS["netd_mk"]

NEED = CaptureNeed(targets=frozenset({"open_aperture"}), keep=frozenset({"stack", "both"}),
                   first_keep=frozenset({"stack", "both"}), min_captures=2,
                   why="flat fields at two or more source temperatures, kept as stacks")


def run(site: AnalysisSite, step: AnalyzeStep, context: AnalysisContext) -> AnalysisOutcome:
    """NETD at the spec's source temperature; writes netd.json, netd_sitf.csv and two plots."""
    from analysis.iq_plots import plot_netd_map, plot_sitf

    uut = context.uut
    flats = read_flats(site, step.instances)
    at_c = spec_source_c(uut.spec_conditions, NETD_MK.key)
    at_from = "the UUT file's netd_mk source_c"
    if at_c is None:
        at_c, at_from = flats[0].source_c, f"capture {flats[0].name} (no spec condition)"
    bad = bad_pixels_of(site, flats, "netd")
    background_c = sum(f.reference_c for f in flats) / len(flats)
    try:
        m = measure_netd([f.source_c for f in flats], [site.load_stack(f.name) for f in flats],
                         uut.band_um, at_c=at_c, background_c=round(background_c, 4),
                         bad_pixel_mask=bad.mask, source_temperature_sigma_k=source_sigma_k(flats),
                         frame_rate_hz=uut.frame_rate_hz, f_number=uut.f_number,
                         conditions={"evaluated_at": at_from,
                                     "captures": list(step.instances)})
    except ValueError as exc:
        raise AnalysisFailed(f"netd: {exc}") from None
    measured = {k: m.conditions[k] for k in ("source_c", "background_c", "frame_rate_hz",
                                             "f_number", "pixels_used", "noise_from",
                                             "brackets_source")}
    measured["frames"] = min(m.conditions["frames"])
    verdict = judge_spec(uut, NETD_MK, m.netd_mk, m.netd_sigma_mk, measured)
    result = m.to_dict()
    result["bad_pixels_masked"] = bad.count
    result["verdicts"] = [verdict.to_dict()] if verdict else []
    if verdict is not None:
        result["passed"] = verdict.passed
    files = [write_result(site, "netd.json", result)]
    fit = m.sitf_fit
    rows = [[t, s, u, r] for t, s, u, r in zip(fit.temperatures_c, fit.signal_counts,
                                               fit.signal_sigma_counts, fit.residuals())]
    files.append(write_csv(site, "netd_sitf.csv", ["source_c", "signal_counts",
                                                   "signal_sigma_counts", "residual_counts"],
                           rows))
    for name, plot in (("netd_sitf.svg", plot_sitf), ("netd_map.svg", plot_netd_map)):
        path = plot(m, site.plot_path(name))
        site.register(path)
        files.append(path)
    summary = {"netd_mk": m.netd_mk, "netd_sigma_mk": m.netd_sigma_mk, "at_source_c": at_c,
               "sitf_counts_per_k": m.sitf_counts_per_k, "median_netd_mk": m.median_netd_mk}
    return AnalysisOutcome(summary, (verdict,) if verdict else (), tuple(files))


def planned_setpoints(step: AnalyzeStep, steps: Sequence[PlanStep]
                      ) -> list[tuple[str, float]]:
    """(mode, setpoint) of the blackbody in force at each of the step's captures."""
    wanted = set(step.instances)
    setpoint: BlackbodyStep | None = None
    out = []
    for s in steps:
        if isinstance(s, BlackbodyStep):
            setpoint = s
        if isinstance(s, CaptureStep) and s.name in wanted and setpoint is not None:
            out.append((setpoint.mode, float(setpoint.setpoint)))
    return out


def planned(step: AnalyzeStep, steps: Sequence[PlanStep]) -> Mapping[str, float]:
    """The span of source temperatures the plan's flats cover: absolute setpoints as
    ``source_min_c``/``source_max_c``, differences over the lab reference (whose temperature
    the plan does not know) as ``difference_min_k``/``difference_max_k``."""
    points = planned_setpoints(step, steps)
    out: dict[str, float] = {}
    absolute = [v for mode, v in points if mode == "absolute"]
    difference = [v for mode, v in points if mode != "absolute"]
    if absolute:
        out.update(source_min_c=min(absolute), source_max_c=max(absolute))
    if difference:
        out.update(difference_min_k=min(difference), difference_max_k=max(difference))
    return out


ANALYSIS = Analysis(
    name="netd",
    description="NETD at the spec's source temperature: radiance-linear SiTF, noise there, "
                "bad pixels masked, with its uncertainty budget",
    run=run,
    needs=lambda options: NEED,
    spec_keys={NETD_MK.key: NETD_MK},
    result_files=("netd.json", "netd_sitf.csv"),
    planned_conditions=planned,
)
