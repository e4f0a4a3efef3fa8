"""Writers of the distortion output contract: results/distortion.json and distortion_points.csv.

Files are written atomically (temporary file in the same folder, flush, fsync, rename), so a
reader never sees half a file and a crash leaves the previous version in place.
Positions are (x, y) = (column, row) pixels; coefficients follow OpenCV's convention.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import tempfile
from pathlib import Path
from typing import Any

import numpy as np

from analysis.distortion import DistortionResult
from analysis.verdicts import overall

__all__ = ["distortion_summary", "write_distortion_json", "write_distortion_points_csv", "write_distortion_results"]

SCHEMA_VERSION = 1


def _clean(x: Any) -> Any:
    """JSON-safe value: numpy scalars to Python, NaN/inf to None."""
    if isinstance(x, dict):
        return {k: _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    if isinstance(x, np.ndarray):
        return _clean(x.tolist())
    if isinstance(x, (np.bool_, bool)):
        return bool(x)
    if isinstance(x, (np.integer,)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        v = float(x)
        return v if math.isfinite(v) else None
    return x


def distortion_summary(result: DistortionResult) -> dict[str, Any]:
    """The JSON document of the output contract as a dict."""
    m = result.model
    g = m.geometry
    d = g.distortion
    model = {
        "fx_px": m.fx, "fy_px": m.fy, "cx_px": m.cx, "cy_px": m.cy,
        "k1": d.k1, "k2": d.k2, "k3": d.k3, "p1": d.p1, "p2": d.p2,
        "opencv_dist_coeffs": d.as_opencv().tolist(),
        "camera_matrix": g.camera_matrix().tolist(),
        "skew_deg": g.skew_deg, "roll_deg": g.roll_deg, "aspect": g.aspect,
        "projection": g.projection,
        "effective_focal_length_mm": g.focal_length_mm, "ifov_mrad": g.ifov_mrad,
        "uncertainty": {
            "fx_px": m.sigma("fx"), "fy_px": math.hypot(m.sigma("fx") * g.aspect, m.sigma("aspect") * m.fx),
            "cx_px": m.sigma("cx"), "cy_px": m.sigma("cy"), "k1": m.sigma("k1"), "k2": m.sigma("k2"),
            "k3": m.sigma("k3"), "p1": m.sigma("p1"), "p2": m.sigma("p2"), "skew_deg": m.sigma("skew"),
            "roll_deg": m.sigma("roll"), "aspect": m.sigma("aspect"),
            "effective_focal_length_mm": m.sigma("fx") * g.pixel_pitch_um / 1000.0,
        },
        "fitted_terms": list(m.fitted_terms),
        "term_choice": list(m.term_choice),
        "reduced_chi2": m.reduced_chi2,
        "rms_residual_px": m.rms_residual_px,
        "n_points_fitted": m.n_points,
    }
    pts = result.points
    h = result.headline
    summary = {
        "mode": result.mode,
        "max_distortion_percent": result.max_distortion_percent,
        "max_distortion_at_px": list(result.max_distortion_at_px),
        "max_distortion_label": result.max_distortion_label,
        "max_distortion_sigma_percent": result.max_distortion_sigma_percent,
        "max_distortion_basis": "fitted model, largest |local distortion| inside the hull of the measured points",
        "worst_point_percent": result.worst_point_percent,
        "worst_point_sigma_percent": result.worst_point_sigma_percent,
        "worst_point_label": result.worst_point_label,
        "classification": result.classification.label,
        "classification_threshold_percent": result.classification.threshold_percent,
        "classification_reason": result.classification.reason,
        "boresight_offset_px": list(result.boresight_offset_px),
        "boresight_offset_sigma_px": list(result.boresight_offset_sigma_px),
        "skew_deg": g.skew_deg,
        "roll_deg": g.roll_deg,
        "efl_mm": g.focal_length_mm,
        "ifov_mrad": g.ifov_mrad,
        "corners_percent": {c.name: c.distortion_percent for c in result.corners},
        "edges_percent": {c.name: c.distortion_percent for c in result.edges},
        "corners_extrapolated": any(c.extrapolated for c in result.corners),
        "field_points": {c.name: {"percent": c.distortion_percent, "sigma_percent": c.sigma_percent,
                                  "sigma_all_terms_percent": c.sigma_all_terms_percent,
                                  "basis": c.basis, "extrapolated": c.extrapolated,
                                  "beyond_measured_field_px": c.beyond_px,
                                  "beyond_measured_radius_percent": c.beyond_percent,
                                  "x_px": c.x_px, "y_px": c.y_px}
                         for c in (*result.corners, *result.edges)},
        "n_points": len(pts),
        "n_measured": int(pts.measured.sum()),
        "n_missing": result.n_missing,
        "n_extra_spots": result.n_extra,
        "n_defects": int(pts.defect.sum()),
        "defect_labels": [lab for lab, f in zip(pts.labels, pts.defect) if f],
        "passed": result.passed,
        "verdict": overall(result.verdicts),
        "headline": None if h is None else {"key": h.key, "value": h.value, "sigma": h.sigma,
                                            "unit": h.unit, "text": h.text},
    }
    return _clean({
        "schema_version": SCHEMA_VERSION,
        "summary": summary,
        "model": model,
        "nominal": {"fx_px": result.nominal.fx, "fy_px": result.nominal.fy,
                    "cx_px": result.nominal.principal_point[0], "cy_px": result.nominal.principal_point[1],
                    "width": result.nominal.width, "height": result.nominal.height,
                    "pixel_pitch_um": result.nominal.pixel_pitch_um, "projection": result.nominal.projection},
        "headline": None if h is None else {"key": h.key, "value": h.value, "sigma": h.sigma,
                                            "unit": h.unit, "text": h.text},
        "verdicts": [{**v.to_dict(), "name": v.key, "passed": v.passed} for v in result.verdicts],
        "thresholds": {
            "classification_none_below_percent": result.classification.threshold_percent
            if result.classification.label != "mustache" else None,
            "defect_threshold_px": result.defect_threshold_px,
        },
        "notes": list(result.notes),
    })


CSV_COLUMNS = (
    "label", "measured", "used_in_fit", "defect", "in_field_stats",
    "expected_x_px", "expected_y_px", "ideal_x_px", "ideal_y_px", "measured_x_px", "measured_y_px",
    "sigma_x_px", "sigma_y_px", "fitted_x_px", "fitted_y_px", "error_x_px", "error_y_px",
    "error_x_mrad", "error_y_mrad", "error_fov_percent", "field_angle_deg", "radius_ideal_px",
    "distortion_percent", "residual_x_px", "residual_y_px", "residual_sigmas", "distortion_sigma_percent",
)


def _points_csv_text(result: DistortionResult) -> str:
    p = result.points
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)

    def f(v: float) -> str:
        return "" if not math.isfinite(float(v)) else f"{float(v):.6g}"

    for i, lab in enumerate(p.labels):
        w.writerow([
            lab, int(p.measured[i]), int(p.used_in_fit[i]), int(p.defect[i]), int(p.in_field_stats[i]),
            *(f(v) for v in (
                *p.expected_nominal_px[i], *p.ideal_px[i], *p.measured_px[i], *p.sigma_px[i], *p.fitted_px[i],
                *p.error_px[i], *p.error_mrad[i], p.error_fov_percent[i], p.field_angle_deg[i],
                p.radius_ideal_px[i], p.distortion_percent[i], *p.residual_px[i], p.residual_sigmas[i],
                np.nan if p.distortion_sigma_percent is None else p.distortion_sigma_percent[i])),
        ])
    return buf.getvalue()


def _follow_umask(fd: int) -> None:
    """mkstemp creates files 0600; give them the mode any other new file gets (0666 less the
    umask) so colleagues can read the results as they can read the frames."""
    mask = os.umask(0o022)
    os.umask(mask)
    os.fchmod(fd, 0o666 & ~mask)


def _atomic_write(path: Path, text: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    _follow_umask(fd)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def write_distortion_json(result: DistortionResult, path: str | os.PathLike[str]) -> Path:
    """Write distortion.json atomically; returns the path."""
    p = Path(path)
    _atomic_write(p, json.dumps(distortion_summary(result), indent=2, allow_nan=False) + "\n")
    return p


def write_distortion_points_csv(result: DistortionResult, path: str | os.PathLike[str]) -> Path:
    """Write distortion_points.csv (one row per point) atomically; returns the path."""
    p = Path(path)
    _atomic_write(p, _points_csv_text(result))
    return p


def write_distortion_results(result: DistortionResult, folder: str | os.PathLike[str]) -> tuple[Path, Path]:
    """Write both contract files into folder (normally <run>/results)."""
    d = Path(folder)
    return (write_distortion_json(result, d / "distortion.json"),
            write_distortion_points_csv(result, d / "distortion_points.csv"))


def write_undistortion_map(result: DistortionResult, folder: str | os.PathLike[str]) -> Path:
    """Write undistortion_map.tif: two float32 pages, map_x then map_y, (rows, cols) each.

    For every pixel of the corrected image they give the column and row to sample in the frame,
    as cv2.remap(frame, map_x, map_y, cv2.INTER_LINEAR) expects; analysis.undistort does the same
    without OpenCV. Built from the fitted model (analysis.undistort.undistortion_maps).
    """
    import tifffile

    from analysis.undistort import undistortion_maps

    map_x, map_y = undistortion_maps(result.model.geometry)
    path = Path(folder) / "undistortion_map.tif"
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=".undistortion_map.", suffix=".tmp")
    _follow_umask(fd)
    os.close(fd)
    try:
        tifffile.imwrite(tmp, np.stack([map_x, map_y]).astype(np.float32),
                         metadata={"axes": "QYX", "pages": "map_x, map_y"})
        with open(tmp, "rb") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)
    return path
