"""Benchmark: distortion analysis of one 640x512 averaged frame of a 15x11 pinhole grid.

nightbench (detect_spots + analyze_grid) against an OpenCV pipeline doing the same job on the
same frame (cv2.findCirclesGrid, then cv2.calibrateCamera with the plate placed at the
collimator focal distance, where its pinholes subtend exactly the collimated field angles).
Prints both times, the ratio, and both accuracies against the simulator's truth.

Note: one fronto-parallel view leaves OpenCV's focal length degenerate with the plate distance
(only f / distance is observable), so its fx is seeded with the nominal value and compared as
it comes; nightbench knows the directions, so its fx is measured.

Run: python3 tests/bench/bench_distortion.py
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import cv2
import numpy as np
import yaml

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from analysis.centroid import detect_spots  # noqa: E402
from analysis.distortion import analyze_grid  # noqa: E402
from analysis.geometry import CameraGeometry, collimator_directions  # noqa: E402
from analysis.targets import PinholeGrid  # noqa: E402
from simulators.camera_render import CameraRenderer, SceneState  # noqa: E402
from simulators.camera_truth import truth_from_mapping  # noqa: E402

F_COLL = 500.0
GRID = PinholeGrid(rows=11, cols=15, pitch_mm=12.0, diameter_mm=1.0)
NOMINAL = CameraGeometry(640, 512, 17.0, 25.0)
REPEATS = 7


def frame_and_truth():
    truth = truth_from_mapping(yaml.safe_load((ROOT / "station/data/demo_camera_truth.yaml").read_text()))
    truth = type(truth)(**{**truth.__dict__, "geometry": truth.geometry.replace(defects=())})
    r = CameraRenderer(truth, seed=7)
    scene = SceneState(source_c=60.0, plate_c=20.0, target=GRID, collimator_focal_mm=F_COLL)
    img = np.mean([r.render(scene, i).astype(np.float64) for i in range(16)], axis=0)
    return img, truth, r.expected_spots(scene)[0]


def ours(img):
    dirs = collimator_directions(GRID.points_mm(), F_COLL)
    spots = detect_spots(img)
    return analyze_grid(spots, dirs, NOMINAL)


def opencv(img):
    # 8-bit for the blob detector: background at 0, the 99.95th percentile (spot peaks, not the
    # few hot pixels at full scale) at 255.
    lo, hi = np.percentile(img, [50.0, 99.95])
    img8 = np.clip((img - lo) / (hi - lo) * 255.0, 0, 255).astype(np.uint8)
    p = cv2.SimpleBlobDetector_Params()
    p.filterByColor, p.blobColor = True, 255
    p.minArea, p.maxArea = 2, 400
    p.filterByCircularity = p.filterByInertia = p.filterByConvexity = False
    p.minThreshold, p.thresholdStep, p.maxThreshold = 30, 10, 220
    det = cv2.SimpleBlobDetector_create(p)
    ok, centers = cv2.findCirclesGrid(img8, (15, 11), flags=cv2.CALIB_CB_SYMMETRIC_GRID, blobDetector=det)
    if not ok:
        return None
    centers = centers.reshape(-1, 2)
    pts = GRID.points_mm()
    # The collimator inverts the plate (analysis.geometry): object point (-x, -y) on the plane z = 0,
    # seen from the distance F_COLL.
    obj = np.column_stack([-pts[:, 0], -pts[:, 1], np.zeros(len(pts))]).astype(np.float32)
    # findCirclesGrid orders its rows itself: pair each centre with the nearest ideal image point.
    ideal = np.column_stack([NOMINAL.fx * obj[:, 0] / F_COLL + 319.5, NOMINAL.fy * obj[:, 1] / F_COLL + 255.5])
    order = np.argmin(np.hypot(centers[:, None, 0] - ideal[None, :, 0], centers[:, None, 1] - ideal[None, :, 1]), axis=0)
    img_pts = centers[order].astype(np.float32)
    K0 = NOMINAL.camera_matrix()
    flags = cv2.CALIB_USE_INTRINSIC_GUESS | cv2.CALIB_FIX_K3
    rms, K, D, rvecs, tvecs = cv2.calibrateCamera([obj], [img_pts], (640, 512), K0, np.zeros(5), flags=flags)
    return K, D.ravel(), img_pts


def best_time(fn, *a):
    times = []
    out = None
    for _ in range(REPEATS):
        t = time.perf_counter()
        out = fn(*a)
        times.append(time.perf_counter() - t)
    return min(times), out


def main() -> None:
    img, truth, truth_xy = frame_and_truth()
    g = truth.geometry
    t_ours, res = best_time(ours, img)
    t_cv, cv_out = best_time(opencv, img)
    print(f"frame 640x512, 15x11 grid, averaged 16 frames; best of {REPEATS}")
    print(f"nightbench: {t_ours * 1e3:8.1f} ms")
    if cv_out is None:
        print("opencv    : findCirclesGrid did not find the grid")
        return
    print(f"opencv    : {t_cv * 1e3:8.1f} ms   (findCirclesGrid + calibrateCamera)")
    print(f"ratio opencv / nightbench: {t_cv / t_ours:.2f}  (> 1: nightbench faster)")
    K, D, cv_pts = cv_out
    m = res.model
    ok = res.points.measured
    ours_c = float(np.sqrt(np.mean(np.sum((res.points.measured_px[ok] - truth_xy[ok]) ** 2, axis=1))))
    cv_c = float(np.sqrt(np.mean(np.sum((cv_pts - truth_xy) ** 2, axis=1))))
    print("accuracy against truth           truth      nightbench      opencv")
    print(f"  centroid RMS, px                     {'':>10} {ours_c:10.4f}  {cv_c:10.4f}")
    rows = (("k1", g.distortion.k1, m.distortion.k1, D[0]), ("k2", g.distortion.k2, m.distortion.k2, D[1]),
            ("p1", g.distortion.p1, m.distortion.p1, D[2]), ("p2", g.distortion.p2, m.distortion.p2, D[3]),
            ("cx, px", g.principal_point[0], m.cx, K[0, 2]), ("cy, px", g.principal_point[1], m.cy, K[1, 2]),
            ("fx, px", g.fx, m.fx, K[0, 0]))
    for name, t, a, b in rows:
        print(f"  {name:8s} {t:12.5f}  {a:12.5f} (err {a - t:+.1e})  {b:12.5f} (err {b - t:+.1e})")


if __name__ == "__main__":
    main()
