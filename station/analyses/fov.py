"""Field of view as an analysis: horizontal, vertical and diagonal FOV in degrees and the IFOV,
with uncertainties and min/max verdicts.

``source: model`` fits the camera model (analysis.distortion) to the step's captures, a pinhole
grid frame or a single-pinhole scan, and takes the FOV through the outer pixel edges of the
fitted model (analysis.fov.fov_from_model). ``source: scan`` reads the edges a `fov_scan` step
found by bisection on the stage (results/fov_scan.json). Either way, a single-pinhole scan among
the captures also gives the IFOV at the centre from the slope of the centroid against azimuth.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from analysis.boresight import PinholeNotFound, find_pinhole
from analysis.distortion_frames import distortion_from_grid_frame, distortion_from_scan_frames
from analysis.fov import FOV_SPEC_KEYS, FieldOfView, fov_from_model, ifov_from_slope
from analysis.targets import PinholeGrid, SinglePinhole
from sequences.plansteps import AnalyzeStep, OptionValue
from station.analyses.common import judge_spec, pose_deg, write_result
from station.analyses.geometry_common import step_output
from station.analyses.registry import (Analysis, AnalysisContext, AnalysisFailed,
                                       AnalysisOutcome, AnalysisSite, CaptureNeed, OptionSpec)

OPTIONS = {"source": OptionSpec("source", "choice", "model",
                                "model: FOV of the camera model fitted to the captures; scan: "
                                "the edges found by a fov_scan step", choices=("model", "scan"))}

NEED = CaptureNeed(targets=frozenset({"pinhole_grid", "single_pinhole"}),
                   keep=frozenset({"average", "both"}), first_keep=frozenset({"average", "both"}),
                   why="a pinhole grid frame or a single-pinhole scan")


def _fitted(site: AnalysisSite, step: AnalyzeStep, context: AnalysisContext):
    """The camera model fitted to the captures (grid: the last capture; scan: all of them)."""
    station, uut = context.station, context.uut
    infos = [site.capture_info(n) for n in step.instances]
    target = station.target_named(str(infos[-1].get("target") or ""))
    saturation = float(uut.full_scale_counts)
    try:
        if isinstance(target, PinholeGrid):
            name = step.instances[-1]
            az, el = pose_deg(infos[-1], name, station)
            return distortion_from_grid_frame(site.load_average(name), target.points_mm(),
                                              station.collimator_focal_mm,
                                              uut.nominal_geometry(), az_deg=az, el_deg=el,
                                              saturation=saturation)
        if isinstance(target, SinglePinhole):
            poses = np.array([pose_deg(i, n, station) for i, n in zip(infos, step.instances)])
            return distortion_from_scan_frames([site.load_average(n) for n in step.instances],
                                               poses, station.collimator_focal_mm,
                                               uut.nominal_geometry(),
                                               pinhole_mm=(target.x_mm, target.y_mm),
                                               labels=list(step.instances),
                                               saturation=saturation)
    except ValueError as exc:
        raise AnalysisFailed(f"fov (model): the camera model could not be fitted: {exc}") from None
    raise AnalysisFailed("fov (model) needs a pinhole grid frame or a single-pinhole scan")


def _ifov_from_scan(site: AnalysisSite, step: AnalyzeStep, context: AnalysisContext
                    ) -> tuple[float, float] | None:
    """IFOV from the slope of x against azimuth on the scan row nearest the centre, if the
    captures are a single-pinhole scan with at least three azimuths on that row."""
    rows: list[tuple[float, float, str]] = []
    for name in step.instances:
        info = site.capture_info(name)
        target = context.station.target_named(str(info.get("target") or ""))
        if not isinstance(target, SinglePinhole):
            return None
        try:
            az, el = pose_deg(info, name, context.station)
        except AnalysisFailed:
            return None
        rows.append((az, el, name))
    if len(rows) < 3:
        return None
    els = np.array([r[1] for r in rows])
    centre_el = els[np.argmin(np.abs(els - np.median(els)))]
    row = [r for r in rows if abs(r[1] - centre_el) < 1e-3]
    if len({round(r[0], 6) for r in row}) < 3:
        return None
    az, xs, sig = [], [], []
    for a, _, name in row:
        try:
            spot = find_pinhole(site.load_average(name),
                                saturation=float(context.uut.full_scale_counts))
        except PinholeNotFound:
            continue
        az.append(a)
        xs.append(spot.x)
        sig.append(spot.sigma_x)
    if len(az) < 3:
        return None
    return ifov_from_slope(az, xs, sig)


def run(site: AnalysisSite, step: AnalyzeStep, context: AnalysisContext) -> AnalysisOutcome:
    """FOV from the fitted model or the fov_scan edges; IFOV from the scan's slope."""
    source = ANALYSIS.options_of(step)["source"]
    extra: dict[str, object] = {}
    if source == "model":
        fit = _fitted(site, step, context)
        geom = fit.model.geometry
        focal_sigma = fit.model.sigma("fx") * geom.pixel_pitch_um / 1000.0
        fov = fov_from_model(geom, focal_sigma_mm=focal_sigma)
        extra = {"fitted_focal_length_mm": geom.focal_length_mm,
                 "fitted_focal_length_sigma_mm": focal_sigma, "projection": geom.projection}
    else:
        data = step_output(site, "fov_scan.json")
        if data is None:
            raise AnalysisFailed("fov (scan) needs the edges of a fov_scan step earlier in the "
                                 "run (results/fov_scan.json); add 'fov_scan: {}' before it")
        f = data["fov"]
        fov = FieldOfView(f["h_deg"], f["v_deg"], f["d_deg"], f["sigma_h_deg"], f["sigma_v_deg"],
                          f["sigma_d_deg"], method="scan", notes=tuple(f.get("notes") or ()))
        extra = {"edges": data.get("edges"), "centre_pose_deg": data.get("centre_pose_deg")}
    ifov = _ifov_from_scan(site, step, context)
    if ifov is not None:
        fov = FieldOfView(fov.h_deg, fov.v_deg, fov.d_deg, fov.sigma_h_deg, fov.sigma_v_deg,
                          fov.sigma_d_deg, ifov[0], ifov[1], fov.method,
                          fov.notes + ("IFOV from the slope of the centroid against azimuth",))
    verdicts = []
    for key, spec in FOV_SPEC_KEYS.items():
        value, sigma = fov.value(key.split("_")[2])
        v = judge_spec(context.uut, spec, value, sigma, {"method": fov.method})
        if v is not None:
            verdicts.append(v)
    nominal = fov_from_model(context.uut.nominal_geometry())
    result = {"fov": fov.to_dict(), "source": source, **extra,
              "nominal": {"h_deg": nominal.h_deg, "v_deg": nominal.v_deg,
                          "d_deg": nominal.d_deg, "ifov_mrad": nominal.ifov_mrad}}
    name = "fov.json" if source == "model" else "fov_scan_result.json"
    path = write_result(site, name, result)
    summary = {"fov_h_deg": fov.h_deg, "fov_v_deg": fov.v_deg, "fov_d_deg": fov.d_deg,
               "sigma_deg": [fov.sigma_h_deg, fov.sigma_v_deg, fov.sigma_d_deg],
               "source": source}
    if math.isfinite(fov.ifov_mrad):
        summary["ifov_mrad"] = fov.ifov_mrad
        summary["sigma_ifov_mrad"] = fov.sigma_ifov_mrad
    return AnalysisOutcome(summary, tuple(verdicts), (path,))


def needs(options: Mapping[str, OptionValue]) -> CaptureNeed:
    return NEED


ANALYSIS = Analysis(
    name="fov",
    description="field of view (horizontal, vertical, diagonal) and IFOV, from the fitted camera "
                "model or the edges of a fov_scan step",
    run=run,
    options=OPTIONS,
    needs=needs,
    spec_keys=FOV_SPEC_KEYS,
    result_files=("fov.json", "fov_scan_result.json"),
)
