"""Analyses a recipe's `analyze` step can name, each a small function over the run's captures.

Each takes the plan step and an object with `run` (RunFolder), `station` (StationConfig) and `uut`
(UutSpec) -- a StepContext during a run, or a light record when re-analysing a finished run -- and
returns a short summary for the journal and console. The computation itself lives in `analysis`.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import numpy as np

from analysis.distortion import _SPEC_KEYS as DISTORTION_SPEC_KEYS
from analysis.distortion_frames import distortion_from_grid_frame, distortion_from_scan_frames
from analysis.results_io import (distortion_summary, write_distortion_results,
                                 write_undistortion_map)
from analysis.sitf import central_mean, fit_sitf, netd
from analysis.targets import PinholeGrid, SinglePinhole
from analysis.uniformity import uniformity
from station.record.atomic import write_json_atomic
from station.record.frame_store import load_average, load_metadata, load_stack
from station.engine.waiting import StepFailed



def _capture_info(run: Any, name: str) -> dict[str, Any]:
    meta = load_metadata(run, name)
    return meta.get("extra", {})


def _pose(info: Mapping[str, Any], fallback: Mapping[str, Any]) -> tuple[float, float]:
    stage = (info.get("readings_start") or {}).get("stage") or {}
    az = stage.get("az", fallback.get("az", 0.0))
    el = stage.get("el", fallback.get("el", 0.0))
    return float(az), float(el)


def _register_all(run: Any, paths: Mapping[str, Any] | tuple) -> None:
    items = paths.values() if isinstance(paths, Mapping) else paths
    for p in items:
        run.register(p)


def run_distortion(step: Any, ctx: Any) -> dict[str, Any]:
    """Grid or scan distortion from the step's captures; writes results/ and plots/."""
    options = step.params.get("options", {}) or {}
    mode = options.get("mode", "grid")
    instances = step.params["instances"]
    nominal = ctx.uut.nominal_geometry()
    spec = {k: v for k, v in ctx.uut.spec_limits.items() if k in DISTORTION_SPEC_KEYS}
    focal = ctx.station.collimator_focal_mm
    saturation = float(2 ** ctx.uut.bit_depth - 1)
    if mode == "grid":
        name = instances[-1]
        info = _capture_info(ctx.run, name)
        target = ctx.station.target_named(info.get("target") or "")
        if not isinstance(target, PinholeGrid):
            raise StepFailed(f"distortion (grid) needs a pinhole grid in the beam for capture "
                             f"{name}; it had {info.get('target')!r}")
        az, el = _pose(info, {})
        labels = [f"r{r}c{c}" for r, c in target.labels()]
        result = distortion_from_grid_frame(load_average(ctx.run, name), target.points_mm(),
                                            focal, nominal, labels=labels, az_deg=az,
                                            el_deg=el, spec=spec, saturation=saturation)
    elif mode == "scan":
        infos = [_capture_info(ctx.run, n) for n in instances]
        target = ctx.station.target_named(infos[0].get("target") or "") if infos else None
        if not isinstance(target, SinglePinhole):
            raise StepFailed("distortion (scan) needs the single pinhole in the beam")
        poses = np.array([_pose(i, {}) for i in infos])
        images = [load_average(ctx.run, n) for n in instances]
        result = distortion_from_scan_frames(images, poses, focal, nominal,
                                             pinhole_mm=(target.x_mm, target.y_mm),
                                             labels=list(instances), spec=spec,
                                             saturation=saturation)
    else:
        raise StepFailed(f"distortion mode must be grid or scan, not {mode!r}")
    out = options.get("results_dir")
    results_dir = ctx.run.results_dir if out is None else out
    _register_all(ctx.run, write_distortion_results(result, results_dir))
    ctx.run.register(write_undistortion_map(result, results_dir))
    from analysis.distortion_plots import write_distortion_plots  # matplotlib: load on use

    _register_all(ctx.run, write_distortion_plots(result, ctx.run.plots_dir))
    summary = distortion_summary(result)["summary"]
    return {k: summary[k] for k in ("max_distortion_percent", "classification",
                                    "boresight_offset_px", "skew_deg") if k in summary}


def _difference_of(info: Mapping[str, Any]) -> float:
    bb = (info.get("readings_start") or {}).get("blackbody") or {}
    if "temperature_c" in bb and "reference_c" in bb:
        return float(bb["temperature_c"]) - float(bb["reference_c"])
    raise StepFailed("capture metadata has no blackbody readings; cannot compute SiTF")


def run_sitf(step: Any, ctx: Any) -> dict[str, Any]:
    """SiTF over the captures (one per blackbody difference) and NETD from the first stack."""
    instances = step.params["instances"]
    infos = [_capture_info(ctx.run, n) for n in instances]
    deltas = [_difference_of(i) for i in infos]
    signals = [central_mean(load_average(ctx.run, n)) for n in instances]
    sitf = fit_sitf(deltas, signals)
    result: dict[str, Any] = {"sitf_counts_per_k": sitf.sitf_counts_per_k,
                              "intercept_counts": sitf.intercept_counts,
                              "r_squared": sitf.r_squared, "delta_t_k": list(sitf.delta_t_k),
                              "signal_counts": list(sitf.signal_counts)}
    path = write_json_atomic(ctx.run.results_dir / "sitf.json", result)
    ctx.run.register(path)
    return {k: result[k] for k in ("sitf_counts_per_k", "r_squared")}


def run_netd(step: Any, ctx: Any) -> dict[str, Any]:
    """NETD from the temporal noise of the captures' stacks over the SiTF of the same captures."""
    instances = step.params["instances"]
    deltas = [_difference_of(_capture_info(ctx.run, n)) for n in instances]
    sitf = fit_sitf(deltas, [central_mean(load_average(ctx.run, n)) for n in instances])
    stacks = list(instances)
    try:
        stack = load_stack(ctx.run, stacks[0])
    except Exception as exc:
        raise StepFailed(f"NETD needs the frames of a capture kept as a stack (keep: both or "
                         f"stack): {exc}") from exc
    noise = netd(stack, sitf.sitf_counts_per_k)
    result = {"netd_k": noise.netd_k, "netd_mk": 1000 * noise.netd_k,
              "temporal_noise_counts": noise.temporal_noise_counts,
              "sitf_counts_per_k": sitf.sitf_counts_per_k, "frames": noise.frames,
              "capture": stacks[0], "f_number": ctx.uut.f_number}
    limit = ctx.uut.spec_limits.get("netd_mk")
    if limit is not None:
        result["passed"] = bool(result["netd_mk"] <= float(limit))
    ctx.run.register(write_json_atomic(ctx.run.results_dir / "netd.json", result))
    return {k: result[k] for k in ("netd_mk", "passed") if k in result}


def run_uniformity(step: Any, ctx: Any) -> dict[str, Any]:
    """Non-uniformity and bad pixels of each capture's averaged frame."""
    out = {}
    for name in step.params["instances"]:
        u = uniformity(load_average(ctx.run, name), dark_counts=0.0)
        out[name] = {"nonuniformity_percent": u.nonuniformity_percent,
                     "bad_pixels": u.bad_pixels, "bad_pixel_fraction": u.bad_pixel_fraction,
                     "mean_counts": u.mean_counts}
    ctx.run.register(write_json_atomic(ctx.run.results_dir / "uniformity.json", out))
    worst = max(v["nonuniformity_percent"] for v in out.values())
    return {"worst_nonuniformity_percent": worst, "captures": len(out)}


ANALYSES: Mapping[str, Callable[[Any, Any], dict[str, Any]]] = {
    "distortion": run_distortion,
    "sitf": run_sitf,
    "netd": run_netd,
    "uniformity": run_uniformity,
}
