"""Re-run the distortion analysis after the fact: on a finished run folder, or on one frame.

Why: the analysis improves after a run (a better fit, a corrected target file) and frames arrive
from other labs. Re-analysis uses the copies of the station, UUT and recipe files kept in the run
folder's inputs/, so the answer does not drift when the originals are edited later; it never
touches an instrument. The computation is the same code path a live run takes
(station.analyses.builtin.run_distortion); the standalone path uses analysis.distortion_frames directly.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import tifffile

from analysis.distortion_frames import distortion_from_grid_frame
from analysis.distortion_plots import write_distortion_plots
from analysis.results_io import (distortion_summary, write_distortion_results,
                                 write_undistortion_map)
from analysis.targets import PinholeGrid
from sequences.plan import expand
from sequences.recipe import load_recipe
from station.analyses.builtin import ANALYSES, run_distortion
from station.inputs.config import StationConfig, load_station
from station.inputs.geometry_file import load_geometry
from station.record.runfolder import (RunFolder, RunFolderError, refuse_inside_run_folder,
                                      refuse_unfinished_run)
from station.inputs.uut_file import load_uut
from station.engine.waiting import StepFailed

_SHORT_KEYS = ("max_distortion_percent", "classification", "boresight_offset_px", "skew_deg",
               "n_defects", "defect_labels")


@dataclass
class _ResultsTarget:
    """The run as seen by an analysis: frames from the run, results and plots where asked.

    Registration only lists the files: re-analysis must not append to the run's event log
    (the manifest's checksums cover it).
    """

    path: Path
    results_dir: Path
    plots_dir: Path
    written: list[Path] = field(default_factory=list)

    def register(self, path: Path | str, kind: str = "result") -> dict[str, Any]:
        self.written.append(Path(path))
        return {"path": str(path), "kind": kind}


@dataclass(frozen=True)
class ReanalysisContext:
    """The light context an analysis needs: the run (frames), the station and the UUT."""

    run: _ResultsTarget
    station: StationConfig
    uut: Any


def _manifest_overrides(run_path: Path) -> dict[str, Any]:
    try:
        data = json.loads((run_path / "manifest.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    plan = data.get("plan") if isinstance(data, dict) else None
    overrides = plan.get("overrides") if isinstance(plan, dict) else None
    return dict(overrides) if isinstance(overrides, dict) else {}


def _input_copy(run: RunFolder, role: str) -> Path:
    try:
        return run.input_path(role)
    except RunFolderError as exc:
        raise ValueError(f"{exc}; this run cannot be re-analysed without its {role} file") \
            from None


def _load_station_copy(run: RunFolder) -> StationConfig:
    """The station copy; if it names files beside the original (a measured grid), use those."""
    copy = _input_copy(run, "station")
    try:
        return load_station(copy)
    except ValueError:
        source = Path(str(run.inputs.get("station", {}).get("source", "")))
        if source.is_file():
            return load_station(source)
        raise


def _short(summary: dict[str, Any], model: dict[str, Any]) -> dict[str, Any]:
    out = {k: summary[k] for k in _SHORT_KEYS if k in summary}
    for key in ("k1", "k2", "k3", "p1", "p2", "fx_px", "fy_px", "cx_px", "cy_px"):
        if key in model:
            out[key] = model[key]
    return out


def analyze_run_folder(path: str | Path, out: str | Path | None = None) -> dict[str, Any]:
    """Re-run every distortion `analyze` step of a finished run; write to `out` or its results/.

    Returns the short summary of the step (several steps: one summary per step id). Raises
    ValueError (file and what to do) if the folder, its inputs or its captures are unusable.
    """
    try:
        run = RunFolder.open(path)
        refuse_unfinished_run(run.path)
        if out is not None:
            refuse_inside_run_folder(out)
    except RunFolderError as exc:
        raise ValueError(str(exc)) from None
    station = _load_station_copy(run)
    uut = load_uut(_input_copy(run, "uut"))
    recipe = load_recipe(_input_copy(run, "recipe"), overrides=_manifest_overrides(run.path),
                         facts=station.facts(frozenset(ANALYSES)))
    steps = [s for s in expand(recipe).steps
             if s.kind == "analyze" and s.params.get("analysis") == "distortion"]
    if not steps:
        raise ValueError(f"{run.path}: its recipe has no distortion analysis step; nothing to "
                         f"re-analyse")
    results_dir = Path(out) if out is not None else run.results_dir
    plots_dir = results_dir / "plots" if out is not None else run.plots_dir
    results: dict[str, dict[str, Any]] = {}
    for step in steps:
        target_dir = results_dir if len(steps) == 1 else results_dir / step.id
        sink = _ResultsTarget(run.path, target_dir,
                              plots_dir if len(steps) == 1 else plots_dir / step.id)
        sink.results_dir.mkdir(parents=True, exist_ok=True)
        sink.plots_dir.mkdir(parents=True, exist_ok=True)
        options = dict(step.params.get("options", {}) or {})
        options["results_dir"] = sink.results_dir
        rerun = type(step)(id=step.id, kind=step.kind, params={**step.params, "options": options},
                           source=step.source, context=step.context)
        try:
            run_distortion(rerun, ReanalysisContext(run=sink, station=station, uut=uut))
        except (StepFailed, KeyError, OSError) as exc:
            raise ValueError(f"{run.path}: step {step.id} ({step.source}) could not be "
                             f"re-analysed: {exc}") from None
        written = json.loads((sink.results_dir / "distortion.json").read_text(encoding="utf-8"))
        results[step.id] = _short(written["summary"], written["model"])
    return next(iter(results.values())) if len(results) == 1 else results


def read_frame(frame: str | Path, shape: tuple[int, int]) -> np.ndarray:
    """A (rows, cols) float image from a TIFF: 2-D as is, a 3-D stack averaged over frames."""
    frame = Path(frame)
    if not frame.is_file():
        raise ValueError(f"{frame}: no such frame file; give the path of a TIFF image")
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
                       out: str | Path) -> dict[str, Any]:
    """Grid-mode distortion of one TIFF frame described by a geometry file; files go in `out`.

    Writes distortion.json, distortion_points.csv and the PNG plots into `out` and returns the
    short summary. Scan mode needs one frame per stage pose and a run folder, so a single-pinhole
    target is refused here with a clear message.
    """
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
    write_distortion_plots(result, out)
    written = distortion_summary(result)
    return _short(written["summary"], written["model"])
