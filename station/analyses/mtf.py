"""MTF as an analysis: ISO 12233 slanted edge (analysis.mtf) on every capture of the edge
target, at the centre and wherever the stage moved the edge in the field.

Per capture: the averaged frame, a region found automatically across the edge, the MTF curve in
cycles/pixel, cycles/mm (UUT pixel pitch) and cycles/mrad (pitch over focal length), MTF at
Nyquist with its 1-sigma uncertainty and MTF50. The verdict on ``min_mtf_at_nyquist`` takes the
worst edge (every position must meet the spec). Writes mtf.json, mtf.csv (one column per edge),
the curves' plot and, with more than one edge, the through-field plot.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from analysis.mtf import SPEC_KEYS, SfrResult, slanted_edge_mtf
from analysis.verdicts import Verdict
from sequences.plansteps import AnalyzeStep, OptionValue
from station.analyses.common import write_result
from station.analyses.registry import (Analysis, AnalysisContext, AnalysisFailed,
                                       AnalysisOutcome, AnalysisSite, CaptureNeed, OptionSpec)
from station.analyses.tables import write_csv

MIN_MTF = SPEC_KEYS["min_mtf_at_nyquist"]

OPTIONS = {
    "orientation": OptionSpec("orientation", "choice", "auto",
                              "which edge to measure: auto (the stronger), vertical (gives the "
                              "horizontal MTF) or horizontal (the vertical MTF)",
                              choices=("auto", "vertical", "horizontal")),
    "roi_length": OptionSpec("roi_length", "count", 400,
                             "region length along the edge, pixels (less if the edge is shorter)",
                             minimum=16),
    "roi_half_width": OptionSpec("roi_half_width", "count", 32,
                                 "region half-width across the edge, pixels", minimum=8),
}

NEED = CaptureNeed(targets=frozenset({"slanted_edge"}), keep=frozenset({"average", "both"}),
                   first_keep=frozenset({"average", "both"}), min_captures=1,
                   why="frames of the slanted edge target")


def mtf_of_frame(image: np.ndarray, options: Mapping[str, OptionValue], *,
                 pixel_pitch_um: float | None, focal_length_mm: float | None,
                 conditions: dict[str, Any]) -> SfrResult:
    """One edge's MTF from one frame with the analysis's options (ValueError if no edge)."""
    from analysis.mtf import find_edge_roi

    orientation = options.get("orientation", "auto")
    roi = find_edge_roi(np.asarray(image, dtype=np.float64),
                        None if orientation == "auto" else orientation,  # type: ignore[arg-type]
                        length_px=int(options.get("roi_length", 400)),  # type: ignore[arg-type]
                        half_width_px=int(options.get("roi_half_width", 32)))  # type: ignore
    rows, cols = np.shape(image)
    cx, cy = roi.x0 + roi.width / 2.0, roi.y0 + roi.height / 2.0
    half_diag = math.hypot(cols / 2.0, rows / 2.0)
    cond = {"field_position": round(math.hypot(cx - cols / 2.0, cy - rows / 2.0) / half_diag, 4),
            "roi_centre_xy": [round(cx, 2), round(cy, 2)], **conditions}
    return slanted_edge_mtf(image, roi, pixel_pitch_um=pixel_pitch_um,
                            focal_length_mm=focal_length_mm, conditions=cond)


def verdict_of(results: Sequence[SfrResult], limit: float | None,
               stated: Mapping[str, float]) -> Verdict | None:
    """`min_mtf_at_nyquist` on the worst edge, with the spec's own conditions beside."""
    if limit is None or not results:
        return None
    worst = min(results, key=lambda r: r.mtf_at_nyquist)
    cond: dict[str, Any] = {"edges_measured": len(results),
                            "mtf_direction": worst.mtf_direction,
                            "edge_angle_deg": round(worst.edge_angle_deg, 3),
                            **{k: v for k, v in worst.conditions.items() if k != "roi"}}
    for name, value in stated.items():
        cond[f"spec_{name}"] = value
    return MIN_MTF.judge(worst.mtf_at_nyquist, worst.mtf_at_nyquist_sigma, limit, cond)


def write_mtf(site: AnalysisSite, results: Sequence[SfrResult], names: Sequence[str],
              verdict: Verdict | None, limit: float | None, shape: tuple[int, int]) -> list:
    """mtf.json, mtf.csv and the plots into the site."""
    from analysis.iq_plots import plot_mtf, plot_mtf_through_field

    edges = [{"capture": n, **r.to_dict()} for n, r in zip(names, results)]
    worst = min(results, key=lambda r: r.mtf_at_nyquist)
    data = {"method": "ISO 12233:2014 e-SFR slanted edge, 4x oversampled",
            "edges": edges, "worst_mtf_at_nyquist": worst.mtf_at_nyquist,
            "worst_mtf_at_nyquist_sigma": worst.mtf_at_nyquist_sigma,
            "verdicts": [verdict.to_dict()] if verdict else []}
    files = [write_result(site, "mtf.json", data)]
    freq = results[0].freq_cyc_per_px
    header = ["freq_cyc_per_px"] + [f"mtf_{n}" for n in names]
    rows = [[float(f)] + [float(np.interp(f, r.freq_cyc_per_px, r.mtf)) for r in results]
            for f in freq]
    files.append(write_csv(site, "mtf.csv", header, rows))
    plots = [plot_mtf(results, site.plot_path("mtf.svg"), spec_min_at_nyquist=limit)]
    if len(results) > 1:
        plots.append(plot_mtf_through_field(results, shape, site.plot_path("mtf_field.svg"),
                                            spec_min_at_nyquist=limit))
    for p in plots:
        site.register(p)
    return files + plots


def _pose(info: Mapping[str, Any]) -> dict[str, float]:
    readings = info.get("readings_start")
    stage = readings.get("stage") if isinstance(readings, Mapping) else None
    if not isinstance(stage, Mapping):
        return {}
    return {f"stage_{k}": round(float(v), 4) for k, v in stage.items()
            if isinstance(v, (int, float)) and not isinstance(v, bool)}


def run(site: AnalysisSite, step: AnalyzeStep, context: AnalysisContext) -> AnalysisOutcome:
    """MTF of every capture's edge; the verdict on the worst."""
    options = ANALYSIS.options_of(step)
    uut = context.uut
    results = []
    shape = (uut.height, uut.width)
    for name in step.instances:
        image = site.load_average(name)
        shape = image.shape
        try:
            results.append(mtf_of_frame(image, options, pixel_pitch_um=uut.pixel_pitch_um,
                                        focal_length_mm=uut.focal_length_mm,
                                        conditions={"capture": name,
                                                    **_pose(site.capture_info(name))}))
        except ValueError as exc:
            raise AnalysisFailed(f"mtf: capture {name}: {exc}") from None
    limit = uut.spec_limits.get(MIN_MTF.key)
    verdict = verdict_of(results, limit, uut.spec_conditions.get(MIN_MTF.key, {}))
    files = write_mtf(site, results, list(step.instances), verdict, limit, shape)
    worst = min(results, key=lambda r: r.mtf_at_nyquist)
    summary = {"edges": len(results), "worst_mtf_at_nyquist": worst.mtf_at_nyquist,
               "worst_mtf_at_nyquist_sigma": worst.mtf_at_nyquist_sigma,
               "centre_mtf_at_nyquist": min(
                   results, key=lambda r: r.conditions["field_position"]).mtf_at_nyquist,
               "mtf50_cyc_per_px": worst.mtf50_cyc_per_px}
    return AnalysisOutcome(summary, (verdict,) if verdict else (), tuple(files))


ANALYSIS = Analysis(
    name="mtf",
    description="MTF by the ISO 12233 slanted edge, at the centre and through the field",
    run=run,
    options=OPTIONS,
    needs=lambda options: NEED,
    spec_keys={MIN_MTF.key: MIN_MTF},
    result_files=("mtf.json", "mtf.csv"),
)
