"""Bad pixels as an analysis: the map of analysis.badpixels from the coolest and warmest flats.

Writes badpixels.json (counts per class, criteria, clusters, operability, conditions),
badpixels.csv (every bad pixel: x, y, class), bad_pixels.tif (uint8 codes: 1 dead, 2 hot,
4 noisy, 8 non-responsive) and a map plot; verdicts on max_bad_pixel_percent,
min_operability_percent and max_cluster_size where the UUT file gives them (counts are exact:
stated with no uncertainty).
"""

from __future__ import annotations

from pathlib import Path

from analysis.badpixels import KINDS, SPEC_KEYS, BadPixelMap, write_mask_tiff
from analysis.uut import UutSpec
from analysis.verdicts import Verdict
from sequences.plansteps import AnalyzeStep
from station.analyses.common import judge_spec, write_result
from station.analyses.flats import bad_pixels_of, read_flats
from station.analyses.registry import (Analysis, AnalysisContext, AnalysisOutcome, AnalysisSite,
                                       CaptureNeed)
from station.analyses.tables import write_csv

NEED = CaptureNeed(targets=frozenset({"open_aperture"}), keep=frozenset({"stack", "both"}),
                   first_keep=frozenset({"stack", "both"}), min_captures=2,
                   why="flat fields at two source temperatures, kept as stacks")


def write_bad_pixels(site: AnalysisSite, bad: BadPixelMap) -> list[Path]:
    """badpixels.json, badpixels.csv, bad_pixels.tif and badpixels.svg into the site."""
    from analysis.iq_plots import plot_bad_pixels

    files = [write_result(site, "badpixels.json", bad.to_dict(max_listed=100000))]
    rows = [[int(x), int(y), kind] for kind in KINDS for x, y in bad.positions(kind)]
    files.append(write_csv(site, "badpixels.csv", ["x", "y", "class"], rows))
    mask = write_mask_tiff(site.result_path("bad_pixels.tif"), bad)
    site.register(mask)
    files.append(mask)
    plot = plot_bad_pixels(bad, site.plot_path("badpixels.svg"))
    site.register(plot)
    files.append(plot)
    return files


def verdicts_of(bad: BadPixelMap, uut: UutSpec) -> list[Verdict]:
    values = {"max_bad_pixel_percent": bad.bad_percent,
              "min_operability_percent": bad.operability_percent,
              "max_cluster_size": float(bad.largest_cluster)}
    measured = {k: bad.conditions[k] for k in ("cool_c", "warm_c", "frames")
                if k in bad.conditions}
    out = []
    for key, spec in SPEC_KEYS.items():
        verdict = judge_spec(uut, spec, values[key], 0.0, measured)
        if verdict is not None:
            out.append(verdict)
    return out


def run(site: AnalysisSite, step: AnalyzeStep, context: AnalysisContext) -> AnalysisOutcome:
    """The bad-pixel map of the step's coolest and warmest flats, with its files and verdicts."""
    bad = bad_pixels_of(site, read_flats(site, step.instances), "badpixels")
    files = write_bad_pixels(site, bad)
    summary = {"bad_pixels": bad.count, "bad_percent": bad.bad_percent,
               "operability_percent": bad.operability_percent,
               "largest_cluster": bad.largest_cluster,
               **{k: int(getattr(bad, k).sum()) for k in KINDS}}
    return AnalysisOutcome(summary, tuple(verdicts_of(bad, context.uut)), tuple(files))


ANALYSIS = Analysis(
    name="badpixels",
    description="dead, hot, noisy and non-responsive pixels, clusters and operability from "
                "flats at two source temperatures",
    run=run,
    needs=lambda options: NEED,
    spec_keys=dict(SPEC_KEYS),
    result_files=("badpixels.json", "badpixels.csv", "bad_pixels.tif"),
)
