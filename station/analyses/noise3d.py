"""3-D noise as an analysis: analysis.noise3d on one flat's stack, bad pixels replaced, each
component in counts and, through the SiTF at that flat's temperature, in mK.

The stack used is the flat nearest the spec's NETD source temperature (the first capture when
the UUT file states none), so the components sit beside the NETD they break down. Bad pixels
(coolest and warmest flat, analysis.badpixels) are replaced by their neighbours' mean first: the
decomposition needs a full cube, and one hot pixel would read as fixed pattern.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from analysis.netd import measure_netd
from analysis.noise3d import COMPONENTS, Noise3dResult, noise_3d, replace_bad_pixels
from sequences.plansteps import AnalyzeStep
from station.analyses.common import write_result
from station.analyses.flats import bad_pixels_of, read_flats, spec_source_c
from station.analyses.registry import (Analysis, AnalysisContext, AnalysisFailed,
                                       AnalysisOutcome, AnalysisSite, CaptureNeed, OptionSpec)
from station.analyses.tables import write_csv

OPTIONS = {"mask_bad_pixels": OptionSpec(
    "mask_bad_pixels", "flag", True, "replace bad pixels (found from the coolest and warmest "
    "flat; needs two temperatures) by their neighbours' mean before the decomposition")}

NEED = CaptureNeed(targets=frozenset({"open_aperture"}), keep=frozenset({"stack", "both"}),
                   first_keep=frozenset({"stack", "both"}), min_captures=1,
                   why="a temporal stack of flat frames (two temperatures for the mK scale "
                       "and the bad-pixel mask)")


def noise3d_of(stack: np.ndarray, bad_mask: np.ndarray | None, sitf_counts_per_k: float | None,
               conditions: dict[str, Any]) -> Noise3dResult:
    """The decomposition of `stack` with `bad_mask` pixels replaced (ValueError if unusable)."""
    cube = replace_bad_pixels(stack, bad_mask) if bad_mask is not None else stack
    cond = dict(conditions)
    cond["bad_pixels_replaced"] = int(bad_mask.sum()) if bad_mask is not None else 0
    return noise_3d(cube, sitf_counts_per_k, conditions=cond)


def write_noise3d(site: AnalysisSite, result: Noise3dResult) -> list:
    """noise3d.json, noise3d.csv (one row per component) and noise3d.svg into the site."""
    from analysis.iq_plots import plot_noise3d

    files = [write_result(site, "noise3d.json", result.to_dict())]
    mk = result.in_mk("sigma") or {}
    mk_u = result.in_mk("sigma_uncertainty") or {}
    rows = [[k, result.sigma[k], result.sigma_uncertainty[k], result.sigma_raw[k],
             mk.get(k, ""), mk_u.get(k, "")] for k in COMPONENTS]
    files.append(write_csv(site, "noise3d.csv", ["component", "sigma_counts",
                                                 "sigma_uncertainty_counts", "sigma_raw_counts",
                                                 "sigma_mk", "sigma_uncertainty_mk"], rows))
    plot = plot_noise3d(result, site.plot_path("noise3d.svg"))
    site.register(plot)
    files.append(plot)
    return files


def run(site: AnalysisSite, step: AnalyzeStep, context: AnalysisContext) -> AnalysisOutcome:
    """3-D noise of the flat nearest the spec's NETD source temperature."""
    options = ANALYSIS.options_of(step)
    uut = context.uut
    flats = read_flats(site, step.instances)
    at_c = spec_source_c(uut.spec_conditions, "netd_mk")
    chosen = (flats[0] if at_c is None
              else min(flats, key=lambda f: abs(f.source_c - at_c)))
    distinct = max(f.source_c for f in flats) - min(f.source_c for f in flats) >= 1.0
    bad = bad_pixels_of(site, flats, "noise3d") if distinct else None
    sitf = None
    stacks = {f.name: site.load_stack(f.name) for f in flats}
    try:
        if distinct:
            sitf = measure_netd([f.source_c for f in flats], [stacks[f.name] for f in flats],
                                uut.band_um, at_c=chosen.source_c,
                                bad_pixel_mask=bad.mask if bad is not None else None
                                ).sitf_counts_per_k
        mask = bad.mask if (bad is not None and options["mask_bad_pixels"]) else None
        result = noise3d_of(stacks[chosen.name], mask, sitf,
                            {"capture": chosen.name, "source_c": round(chosen.source_c, 4),
                             "reference_c": round(chosen.reference_c, 4),
                             "frame_rate_hz": uut.frame_rate_hz,
                             "sitf_at_source_c": sitf is not None})
    except ValueError as exc:
        raise AnalysisFailed(f"noise3d: {exc}") from None
    files = write_noise3d(site, result)
    summary: dict[str, Any] = {f"sigma_{k}_counts": result.sigma[k] for k in COMPONENTS}
    summary["total_temporal_counts"] = result.total_temporal_counts
    mk = result.in_mk("sigma")
    if mk is not None:
        summary["sigma_tvh_mk"] = mk["tvh"]
    return AnalysisOutcome(summary, (), tuple(files))


ANALYSIS = Analysis(
    name="noise3d",
    description="3-D noise (temporal, row, column, frame and random components) of a flat's "
                "stack, in counts and mK",
    run=run,
    options=OPTIONS,
    needs=lambda options: NEED,
    result_files=("noise3d.json", "noise3d.csv"),
)
