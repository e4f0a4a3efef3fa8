"""Distortion of one standalone TIFF frame (grid mode), for `nightbench analyze --frame`.

Kept apart from the run-folder re-analysis so the command imports only what one frame needs
(no analysis registry, no other analyses); plotting is imported last, after the results are
written, and can be skipped.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from station.analyses.registry import JsonValue

__all__ = ["analyze_frame_file", "read_frame", "write_plots"]

_SHORT_KEYS = ("max_distortion_percent", "classification", "boresight_offset_px", "skew_deg",
               "n_defects", "defect_labels")


def _short(summary: dict[str, JsonValue], model: dict[str, JsonValue]) -> dict[str, JsonValue]:
    out = {k: summary[k] for k in _SHORT_KEYS if k in summary}
    for key in ("k1", "k2", "k3", "p1", "p2", "fx_px", "fy_px", "cx_px", "cy_px"):
        if key in model:
            out[key] = model[key]
    return out


def read_frame(frame: str | Path, shape: tuple[int, int]) -> np.ndarray:
    """A (rows, cols) float image from a TIFF: 2-D as is, a 3-D stack averaged over frames."""
    frame = Path(frame)
    if not frame.is_file():
        raise ValueError(f"{frame}: no such frame file; give the path of a TIFF image")
    import tifffile

    try:
        data = tifffile.imread(frame)
    except Exception as exc:  # tifffile raises its own error types for non-TIFF content
        raise ValueError(f"{frame}: not a readable TIFF image ({exc}); export the frame as "
                         f"TIFF (one 2-D image or a stack of frames)") from None
    data = np.asarray(data)
    if data.ndim == 3 and data.shape[-1] in (3, 4) and data.shape[:2] == shape:
        raise ValueError(f"{frame}: a colour image {data.shape}; give the camera's raw "
                         f"single-channel frame")
    if data.ndim == 3:
        data = data.astype(np.float64).mean(axis=0)
    if data.ndim != 2:
        raise ValueError(f"{frame}: a {data.ndim}-D array {data.shape}; expected one 2-D frame "
                         f"or a 3-D stack (frames, rows, cols)")
    bad = int(data.size - np.count_nonzero(np.isfinite(data)))
    if bad:
        raise ValueError(f"{frame}: {bad} pixel(s) are NaN or infinite; a camera frame holds "
                         "finite counts. Export the raw frame again (or replace those pixels)")
    if data.shape != shape:
        raise ValueError(f"{frame}: the frame is {data.shape[0]} rows x {data.shape[1]} cols but "
                         f"the geometry file says {shape[0]} x {shape[1]} (uut height x width); "
                         f"check the geometry file or the frame")
    return data.astype(np.float64, copy=False)


def analyze_frame_file(frame: str | Path, geometry: str | Path,
                       out: str | Path, *, plots: bool = True) -> dict[str, JsonValue]:
    """Grid-mode distortion of one TIFF frame described by a geometry file; files go in `out`.

    Writes distortion.json, distortion_points.csv, then (unless ``plots`` is false) the SVG plots
    into `out`, and returns the short summary. The results are on the disk before the plots are
    drawn: a slow or failing plot never costs the numbers. Scan mode needs one frame per stage pose and a run folder, so a single-pinhole
    target is refused here with a clear message.
    """
    from analysis.distortion_frames import distortion_from_grid_frame
    from analysis.results_io import (distortion_summary, write_distortion_results,
                                     write_undistortion_map)
    from analysis.targets import PinholeGrid
    from station.inputs.geometry_file import load_geometry
    from station.record.runfolder import RunFolderError, refuse_inside_run_folder

    try:
        refuse_inside_run_folder(out)
    except RunFolderError as exc:
        raise ValueError(str(exc)) from None
    geom = load_geometry(geometry)
    if not isinstance(geom.target, PinholeGrid):
        raise ValueError(f"{geometry}: a standalone frame can only be analysed with a pinhole "
                         f"grid target; scan mode (single pinhole) needs a run folder with one "
                         f"capture per stage pose")
    image = read_frame(frame, geom.shape)
    labels = [f"r{r}c{c}" for r, c in geom.target.labels()]
    result = distortion_from_grid_frame(image, geom.target.points_mm(), geom.collimator_focal_mm,
                                        geom.nominal, labels=labels, az_deg=geom.az_deg,
                                        el_deg=geom.el_deg, spec=geom.spec,
                                        saturation=geom.saturation)
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    write_distortion_results(result, out)
    write_undistortion_map(result, out)
    written = distortion_summary(result)
    if plots:
        write_plots(result, out)
    return _short(written["summary"], written["model"])


def write_plots(result: object, out: Path) -> None:
    """The distortion SVGs (written as text by analysis.svg_plot: no plotting library, no
    display, nothing heavy imported)."""
    from analysis.distortion_plots import write_distortion_plots

    write_distortion_plots(result, out)  # type: ignore[arg-type]
