"""The image-quality analyses on frames captured elsewhere: TIFF files plus a geometry file.

`nightbench analyze mtf --frame F.tif --geometry G.yaml --out DIR` (and noise3d on one TIFF
stack, badpixels on two: the cool and the warm flat) run the same computation and write the same
files as the registered analyses do inside a run (station/analyses/mtf.py, noise3d.py,
badpixels.py), through a site whose results go to DIR and plots to DIR/plots.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np
import tifffile

from analysis.badpixels import bad_pixel_map
from analysis.targets import OpenAperture, SlantedEdge
from station.analyses import badpixels as badpixels_glue
from station.analyses import mtf as mtf_glue
from station.analyses import noise3d as noise3d_glue
from station.analyses.registry import JsonValue
from station.analyses.site import FolderSite
from station.inputs.geometry_file import GeometrySpec, load_geometry
from station.record.runfolder import RunFolderError, refuse_inside_run_folder

__all__ = ["FRAME_ANALYSES", "analyze_iq_frames", "read_stack"]

FRAME_ANALYSES = ("mtf", "noise3d", "badpixels")


def read_stack(frame: str | Path, shape: tuple[int, int]) -> np.ndarray:
    """A (frames, rows, cols) stack from a TIFF (a single 2-D frame is refused: no temporal
    noise in it)."""
    frame = Path(frame)
    if not frame.is_file():
        raise ValueError(f"{frame}: no such frame file; give the path of a TIFF stack")
    try:
        data = np.asarray(tifffile.imread(frame))
    except Exception as exc:  # tifffile raises its own error types for non-TIFF content
        raise ValueError(f"{frame}: not a readable TIFF ({exc}); export the frames as one "
                         "multi-page TIFF") from None
    if data.ndim != 3 or data.shape[0] < 2:
        raise ValueError(f"{frame}: shape {data.shape}; this analysis needs a stack of 2 or "
                         "more frames (frames, rows, cols), not one averaged frame")
    if data.shape[1:] != shape:
        raise ValueError(f"{frame}: frames are {data.shape[1]} x {data.shape[2]} but the "
                         f"geometry file says {shape[0]} x {shape[1]} (uut height x width)")
    return data


def _site(out: Path) -> FolderSite:
    return FolderSite(out, out, out / "plots", run_id="standalone")


def analyze_iq_frames(analysis: str, frames: Sequence[str | Path], geometry: str | Path,
                      out: str | Path) -> dict[str, JsonValue]:
    """Run `analysis` (mtf, noise3d or badpixels) on TIFF files; files go in `out`."""
    from station.analyses.reanalyze import read_frame

    try:
        refuse_inside_run_folder(out)
    except RunFolderError as exc:
        raise ValueError(str(exc)) from None
    geom: GeometrySpec = load_geometry(geometry)
    out = Path(out)
    site = _site(out)
    nominal = geom.nominal
    if analysis == "mtf":
        if not isinstance(geom.target, SlantedEdge):
            raise ValueError(f"{geometry}: mtf needs target kind slanted_edge, not "
                             f"{geom.target.kind}")
        if len(frames) != 1:
            raise ValueError("mtf takes one --frame (a frame or a stack, averaged)")
        options = {k: spec.default for k, spec in mtf_glue.OPTIONS.items()}
        name = Path(frames[0]).stem
        image = read_frame(frames[0], geom.shape)
        try:
            result = mtf_glue.mtf_of_frame(image, options, pixel_pitch_um=nominal.pixel_pitch_um,
                                           focal_length_mm=nominal.focal_length_mm,
                                           conditions={"capture": name,
                                                       "frame_file": str(frames[0])})
        except ValueError as exc:
            raise ValueError(f"{frames[0]}: {exc}") from None
        limit = geom.spec.get("min_mtf_at_nyquist")
        verdict = mtf_glue.verdict_of([result], limit, {})
        mtf_glue.write_mtf(site, [result], [name], verdict, limit, geom.shape)
        return {"mtf_at_nyquist": result.mtf_at_nyquist,
                "mtf_at_nyquist_sigma": result.mtf_at_nyquist_sigma,
                "mtf50_cyc_per_px": result.mtf50_cyc_per_px,
                "edge_angle_deg": result.edge_angle_deg,
                **({"verdict": verdict.status} if verdict else {})}
    if not isinstance(geom.target, OpenAperture):
        raise ValueError(f"{geometry}: {analysis} needs target kind open_aperture (flat "
                         f"fields), not {geom.target.kind}")
    stacks = [read_stack(f, geom.shape) for f in frames]
    try:
        return _flat_analysis(analysis, frames, stacks, geom, site)
    except ValueError as exc:
        raise ValueError(f"{', '.join(str(f) for f in frames)}: {exc}") from None


def _flat_analysis(analysis: str, frames: Sequence[str | Path], stacks: list[np.ndarray],
                   geom: GeometrySpec, site: FolderSite) -> dict[str, JsonValue]:
    temps = geom.flat_temperatures_c
    conditions = ({"cool_c": temps[0], "warm_c": temps[1]} if temps else {})
    if analysis == "badpixels":
        if len(stacks) != 2:
            raise ValueError("badpixels takes two --frame stacks: the cool flat, then the warm")
        bad = bad_pixel_map(stacks[0], stacks[1],
                            conditions={**conditions, "cool_capture": str(frames[0]),
                                        "warm_capture": str(frames[1])})
        badpixels_glue.write_bad_pixels(site, bad)
        verdicts = [v for v in bad.verdicts(geom.spec)]
        return {"bad_pixels": bad.count, "bad_percent": bad.bad_percent,
                "operability_percent": bad.operability_percent,
                **{f"verdict_{v.key}": v.status for v in verdicts}}
    if analysis == "noise3d":
        if len(stacks) not in (1, 2):
            raise ValueError("noise3d takes one --frame stack (and optionally a second flat at "
                             "another temperature, for the bad-pixel mask)")
        mask = bad_pixel_map(stacks[0], stacks[1]).mask if len(stacks) == 2 else None
        result = noise3d_glue.noise3d_of(stacks[0], mask, geom.sitf_counts_per_k,
                                         {"capture": str(frames[0]), **conditions})
        noise3d_glue.write_noise3d(site, result)
        return {f"sigma_{k}_counts": v for k, v in result.sigma.items()}
    raise ValueError(f"--frame works with distortion, {', '.join(FRAME_ANALYSES)}; "
                     f"{analysis} needs a RUN_FOLDER")
