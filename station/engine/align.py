"""The closed-loop steps: `align` (point the UUT at the collimator axis) and `fov_scan` (find the
field's edges by bisection on the stage).

Both work only through the driver interfaces and the clock, like every handler, and leave the
maths to `analysis.alignment` and `analysis.fov_scan`. Every look (move, frames, spot) is an event in
events.jsonl; the results go to results/alignment.json and results/fov_scan.json.

The aligned pose as origin (the design): when an `align` step converges with ``origin: true``
(the default), its pose becomes the *stage origin* for the rest of the run: every later `move`
and every pose of a later `scan` is taken relative to it, on the az and el axes
(``move: {az: 0, el: 0}`` goes back to the aligned pose). The origin is an event
(``stage.origin``) and part of the align step's journal record, so a resumed run restores it.
Soft limits are checked on the absolute pose, before anything moves. Capture metadata keeps the
stage's absolute readings, so the analyses see the real gimbal angles.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from analysis.alignment import (AlignmentFault, AlignmentIteration, align, aligned_pose,
                                axis_direction_at)
from analysis.boresight import PinholeNotFound, find_pinhole
from analysis.fov_scan import scan_fov, spot_flux_near
from analysis.geometry import project
from analysis.targets import SinglePinhole
from sequences.plansteps import AlignStep, FovScanStep
from station.engine.waiting import StepFailed, wait_until
from station.record.atomic import write_json_atomic

__all__ = ["run_align", "run_fov_scan", "restore_align_origin", "ANGULAR_AXES"]

ANGULAR_AXES = ("az", "el")
_DEG_UNITS = frozenset({"deg", "degree", "degrees"})
_STAGE_TIMEOUT_S = 600.0


def _check_gimbal(ctx: Any, what: str) -> tuple[tuple[float, float], tuple[float, float]]:
    """Soft limits (az, el) in degrees; StepFailed unless the stage has az and el in degrees."""
    axes = ctx.station.limits.axes
    missing = [a for a in ANGULAR_AXES if a not in axes]
    if missing:
        raise StepFailed(f"{what} needs a gimbal with axes az and el; the stage has "
                         f"{', '.join(sorted(axes)) or 'none'}")
    for a in ANGULAR_AXES:
        if axes[a].unit not in _DEG_UNITS:
            raise StepFailed(f"{what} needs az and el in degrees; {a} is in {axes[a].unit!r}")
    az, el = (axes[a] for a in ANGULAR_AXES)
    return (az.minimum, az.maximum), (el.minimum, el.maximum)


def _check_pinhole(ctx: Any, what: str) -> SinglePinhole:
    name = ctx.current_target
    target = ctx.station.target_named(name) if name else None
    if not isinstance(target, SinglePinhole):
        shown = f"'{name}' ({getattr(target, 'kind', 'unknown')})" if name else "no target chosen"
        raise StepFailed(f"{what} needs the single pinhole in the beam; the wheel shows {shown}. "
                         "Put a 'target:' step naming the station's single pinhole before it")
    return target


def _move(ctx: Any, pose: tuple[float, float], what: str) -> None:
    """Move az and el to an absolute pose: refused before anything moves if out of limits."""
    for axis, value in zip(ANGULAR_AXES, pose):
        refusal = ctx.station.limits.position_problem(axis, value)
        if refusal is not None:
            raise StepFailed(f"{what}: {getattr(refusal, 'message', refusal)}; nothing was sent")
    stage = ctx.bench.stage
    stage.move_to(dict(zip(ANGULAR_AXES, pose)))
    wait_until(ctx.clock, ctx.requests, lambda: not stage.is_moving(),
               timeout_s=_STAGE_TIMEOUT_S, poll_s=ctx.poll_s / 4, what=f"stage ({what})",
               on_poll=ctx.tick)


def _pose_now(ctx: Any) -> tuple[float, float]:
    stage = ctx.bench.stage
    return float(stage.position("az")), float(stage.position("el"))


def _average(ctx: Any, frames: int) -> np.ndarray:
    """The mean of `frames` frames (float64, [row, col]); frames are probes, not kept. Frames of
    the wrong shape or with a repeated counter are skipped (as a capture does), and the last
    counter is handed on so the next capture sees no false gap."""
    camera = ctx.bench.camera
    shape = tuple(camera.shape)
    total = None
    taken = bad = 0
    while taken < frames:
        before = taken + bad
        for frame in camera.grab(frames - taken):
            ctx.requests.check()
            last = getattr(ctx, "last_counter", None)
            if frame.data.shape != shape or (last is not None and frame.counter <= last):
                bad += 1
                if bad > 20:
                    raise StepFailed(f"camera: {bad} bad frames while pointing; check the "
                                     "grabber and cable")
                continue
            ctx.last_counter = frame.counter
            data = np.asarray(frame.data, dtype=np.float64)
            total = data if total is None else total + data
            taken += 1
        if taken + bad == before:
            raise StepFailed("camera gave no frame while pointing; check the grabber")
    if total is None:
        raise StepFailed("camera gave no frame; check the grabber")
    return total / taken


def _blackbody_note(ctx: Any) -> str:
    try:
        return f"blackbody {ctx.bench.blackbody.difference():+.2f} K above its reference"
    except Exception:  # noqa: BLE001 - a note for a message, never a second fault
        return "blackbody reading unavailable"


def _reference_px(ctx: Any) -> tuple[float, float]:
    """The UUT's stated reference pixel if its description has one, else the detector centre."""
    ref = getattr(ctx.uut, "reference_px", None)
    if ref is not None:
        return float(ref[0]), float(ref[1])
    return (ctx.uut.width - 1) / 2.0, (ctx.uut.height - 1) / 2.0


def run_align(step: AlignStep, ctx: Any) -> dict[str, Any]:
    """Closed loop on the single pinhole until its image sits on the reference pixel."""
    limits = _check_gimbal(ctx, "align")
    _check_pinhole(ctx, "align")
    geom = ctx.uut.nominal_geometry()
    reference = _reference_px(ctx)
    saturation = float(ctx.uut.full_scale_counts)
    start = _pose_now(ctx)

    def measure(pose: tuple[float, float]) -> tuple[tuple[float, float], tuple[float, float]]:
        _move(ctx, pose, "align")
        image = _average(ctx, step.frames)
        try:
            spot = find_pinhole(image, saturation=saturation)
        except PinholeNotFound as exc:
            raise StepFailed(f"align: pinhole not found at az {pose[0]:.4f}, el {pose[1]:.4f} "
                             f"deg: {exc} ({_blackbody_note(ctx)})") from None
        return (spot.x, spot.y), (spot.sigma_x, spot.sigma_y)

    def log(it: AlignmentIteration) -> None:
        ctx.emit("align.iteration", step=step.id, **it.to_dict())
        ctx.log("info", f"align {it.iteration}: az {it.pose_deg[0]:.4f} el {it.pose_deg[1]:.4f} "
                        f"deg, spot off by {it.residual_px:.3f} px")

    try:
        result = align(measure, start, reference, geom, tolerance_px=step.tolerance_px,
                       max_iterations=step.max_iterations, limits_deg=limits, on_iteration=log)
    except AlignmentFault as exc:
        _write(ctx, "alignment.json", {"converged": False, "cause": str(exc),
                                       "reference_px": list(reference),
                                       "iterations": [i.to_dict() for i in exc.history]})
        raise StepFailed(f"align: {exc}") from None
    except ValueError as exc:  # the model cannot invert a spot (behind the camera, ...)
        raise StepFailed(f"align: {exc}") from None
    data = {"converged": True, "boresight_deg": [result.az_deg, result.el_deg],
            "sigma_deg": [result.sigma_az_deg, result.sigma_el_deg],
            "boresight_error_mrad": result.error_mrad, "reference_px": list(reference),
            "start_deg": list(start), "tolerance_px": step.tolerance_px,
            "iterations": [i.to_dict() for i in result.iterations]}
    _write(ctx, "alignment.json", data)
    _plot_alignment(ctx, data)
    origin: dict[str, float] = {}
    if step.origin:
        origin = {"az": result.az_deg, "el": result.el_deg}
        ctx.origin = dict(origin)
        ctx.emit("stage.origin", step=step.id, origin=origin)
    ctx.emit("align.done", step=step.id, boresight_deg=data["boresight_deg"],
             sigma_deg=data["sigma_deg"], iterations=len(result.iterations))
    return {"boresight_deg": data["boresight_deg"], "sigma_deg": data["sigma_deg"],
            "boresight_error_mrad": result.error_mrad, "iterations": len(result.iterations),
            "origin": origin}


def restore_align_origin(record: Mapping[str, Any], ctx: Any) -> None:
    """On resume: the origin a completed align step set (from its journal record)."""
    data = record.get("data", record)
    origin = data.get("origin") if isinstance(data, Mapping) else None
    if origin:
        ctx.origin = {str(k): float(v) for k, v in origin.items()}
        ctx.emit("stage.origin", restored=True, origin=ctx.origin)


def run_fov_scan(step: FovScanStep, ctx: Any) -> dict[str, Any]:
    """Field of view by bisection on the stage from the current pose (align first)."""
    limits = _check_gimbal(ctx, "fov_scan")
    _check_pinhole(ctx, "fov_scan")
    nominal = ctx.uut.nominal_geometry()
    centre = _pose_now(ctx)
    image = _average(ctx, step.frames)
    try:
        spot = find_pinhole(image, saturation=float(ctx.uut.full_scale_counts))
    except PinholeNotFound as exc:
        raise StepFailed(f"fov_scan: the pinhole is not seen at the start pose: {exc} "
                         f"({_blackbody_note(ctx)}); align first") from None
    full_scale = float(ctx.uut.full_scale_counts)
    ref_flux, ref_sigma = spot_flux_near(image, spot.x, spot.y, saturation=full_scale)
    if not ref_flux > 0:
        raise StepFailed("fov_scan: the pinhole's flux is not above the background")
    # Where the model expects the spot at another pose: the nominal camera's displacement from
    # the centre pose, added to where the spot really is at the centre.
    d0 = axis_direction_at(0.0, 0.0)[None, :]
    seen_at_centre = np.array([spot.x, spot.y]) - project(nominal, d0)[0]
    looks = iter(range(1_000_000))

    def fraction(pose: tuple[float, float]) -> tuple[float, float]:
        _move(ctx, pose, "fov_scan")
        img = _average(ctx, step.frames)
        rel = axis_direction_at(pose[0] - centre[0], pose[1] - centre[1])[None, :]
        guess = project(nominal, rel)[0] + seen_at_centre
        x = float(np.clip(guess[0], 0, nominal.width - 1)) if np.isfinite(guess[0]) else 0.0
        y = float(np.clip(guess[1], 0, nominal.height - 1)) if np.isfinite(guess[1]) else 0.0
        f, s = spot_flux_near(img, x, y, saturation=full_scale)
        frac = f / ref_flux
        ctx.emit("fov_scan.look", step=step.id, n=next(looks), pose_deg=list(pose),
                 fraction=frac, sigma=s / ref_flux)
        return frac, s / ref_flux

    def pose_of(px: tuple[float, float]) -> tuple[float, float]:
        """Where the model expects the spot at pixel px, from where it is seen now."""
        return aligned_pose((spot.x, spot.y), px, centre, nominal)

    try:
        res = scan_fov(fraction, centre, nominal, tolerance_deg=step.tolerance_deg,
                       reference_rel_sigma=ref_sigma / ref_flux, limits_deg=limits,
                       pose_of=pose_of)
    except ValueError as exc:
        raise StepFailed(f"fov_scan: {exc}") from None
    _move(ctx, centre, "fov_scan back to the start pose")
    data = res.to_dict()
    data["reference_flux"] = ref_flux
    _write(ctx, "fov_scan.json", data)
    _plot_edges(ctx, res)
    fov = res.fov
    ctx.emit("fov_scan.done", step=step.id, fov=fov.to_dict())
    return {"fov_h_deg": fov.h_deg, "fov_v_deg": fov.v_deg, "fov_d_deg": fov.d_deg,
            "sigma_deg": [fov.sigma_h_deg, fov.sigma_v_deg, fov.sigma_d_deg]}


def _write(ctx: Any, name: str, data: Mapping[str, Any]) -> Any:
    path = write_json_atomic(ctx.run.results_dir / name, dict(data))
    ctx.run.register(path)
    return path


def _plot_alignment(ctx: Any, data: Mapping[str, Any]) -> list[Any]:
    from analysis.geometry_plots import plot_alignment_convergence

    path = plot_alignment_convergence(data["iterations"], float(data["tolerance_px"]),
                                      ctx.run.plots_dir / "alignment_convergence.svg")
    ctx.run.register(path)
    return [path]


def _plot_edges(ctx: Any, res: Any) -> list[Any]:
    from analysis.geometry_plots import plot_fov_edges

    path = plot_fov_edges(res, ctx.run.plots_dir / "fov_edges.svg")
    ctx.run.register(path)
    return [path]

