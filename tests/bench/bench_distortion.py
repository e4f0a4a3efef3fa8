"""Benchmark of the default `analyze distortion` path (not a test: it prints figures).

1. Centroids of the default path (analysis.distortion_frames.distortion_from_grid_frame) against
   the Cramer-Rao bound of a pixel-integrated Gaussian (exact Fisher information, Winick 1986;
   Mendez et al. 2013) at SNR 20 and 100, analytic spots on a 320x256 frame.
2. The 640x512 frame of a 15x11 grid from the simulated camera: nightbench (detect + fit) against
   an OpenCV pipeline doing the same job (cv2.findCirclesGrid, then cv2.calibrateCamera with the
   plate at the collimator focal distance, where its pinholes subtend the collimated field
   angles). Medians of interleaved repetitions, the ratio, and both accuracies against the truth.
   One fronto-parallel view leaves OpenCV's focal length degenerate with the plate distance, so
   its fx is seeded with the nominal value.
3. A 61x45 grid (2,745 spots) on 2560x2048: analysis time.
4. Scan mode: milliseconds per pose of centroid_at on a 640x512 frame.
5. `nightbench analyze distortion --frame` as a whole process beside the analysis proper.

Run: python3 tests/bench/bench_distortion.py   (the machine's load changes every figure; the
ratios of interleaved runs are the stable part)
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import cv2
import numpy as np
import yaml
from scipy.special import ndtr

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from analysis.centroid import centroid_at, detect_spots  # noqa: E402
from analysis.distortion import analyze_grid  # noqa: E402
from analysis.distortion_frames import distortion_from_grid_frame  # noqa: E402
from analysis.geometry import CameraGeometry, collimator_directions, project  # noqa: E402
from analysis.targets import PinholeGrid  # noqa: E402
from simulators.camera_render import CameraRenderer, SceneState  # noqa: E402
from simulators.camera_truth import truth_from_mapping  # noqa: E402

F_COLL = 500.0
GRID = PinholeGrid(rows=11, cols=15, pitch_mm=12.0, diameter_mm=1.0)
NOMINAL = CameraGeometry(640, 512, 17.0, 25.0)
REPEATS = 9


def demo_truth(**changes):
    t = truth_from_mapping(yaml.safe_load((ROOT / "station/data/demo_camera_truth.yaml").read_text()))
    return type(t)(**{**t.__dict__, "geometry": t.geometry.replace(**changes)})


# --- 1. CRLB ------------------------------------------------------------------------------------

def crlb_x(flux, s, noise, dx, dy, half=3):
    p0 = np.array([flux, half + dx, half + dy, s, s, 0.0])
    k = np.arange(2 * half + 1)

    def mu(p):
        ex = ndtr((k + 0.5 - p[1]) / p[3]) - ndtr((k - 0.5 - p[1]) / p[3])
        ey = ndtr((k + 0.5 - p[2]) / p[4]) - ndtr((k - 0.5 - p[2]) / p[4])
        return (p[0] * np.outer(ey, ex) + p[5]).ravel()

    g = []
    for i in range(6):
        d = np.zeros(6)
        d[i] = 1e-5 * max(1.0, abs(p0[i]))
        g.append((mu(p0 + d) - mu(p0 - d)) / (2 * d[i]))
    g = np.array(g)
    return math.sqrt(np.linalg.inv(g @ g.T / noise ** 2)[1, 1])


def crlb_ratio(snr, s=0.7, seeds=4):
    nom = CameraGeometry(320, 256, 17.0, 25.0)
    fill = 0.9
    px = fill * 320 / 14 * 0.017 * F_COLL / 25.0
    py = fill * 256 / 10 * 0.017 * F_COLL / 25.0
    X, Y = np.meshgrid((np.arange(15) - 7) * px, (np.arange(11) - 5) * py)
    pts = np.column_stack([X.ravel(), Y.ravel()])
    dirs = collimator_directions(pts, F_COLL)
    flux = 20_000.0
    noise = flux / (snr * math.sqrt(4 * math.pi) * s)
    rng = np.random.default_rng(int(snr))
    e2, b2 = [], []
    c, r = np.arange(320), np.arange(256)
    for _ in range(seeds):
        xy = project(nom.replace(cx=159.5 + rng.uniform(-.5, .5), cy=127.5 + rng.uniform(-.5, .5)), dirs)
        img = np.full((256, 320), 500.0)
        for x, y in xy:
            img += flux * np.outer(ndtr((r + .5 - y) / s) - ndtr((r - .5 - y) / s),
                                   ndtr((c + .5 - x) / s) - ndtr((c - .5 - x) / s))
        img += rng.normal(0, noise, img.shape)
        got = distortion_from_grid_frame(img, pts, F_COLL, nom).points.measured_px
        ok = np.all(np.isfinite(got), axis=1)
        e2 += ((got[ok] - xy[ok]) ** 2).ravel().tolist()
        for x, y in xy[ok]:
            b2 += [crlb_x(flux, s, noise, x - round(x), y - round(y)) ** 2,
                   crlb_x(flux, s, noise, y - round(y), x - round(x)) ** 2]
    return math.sqrt(np.mean(e2)), math.sqrt(np.mean(b2))


# --- 2. against OpenCV ----------------------------------------------------------------------------

def demo_frame():
    truth = demo_truth(defects=())
    r = CameraRenderer(truth, seed=7)
    scene = SceneState(source_c=60.0, plate_c=20.0, target=GRID, collimator_focal_mm=F_COLL)
    img = np.mean([r.render(scene, i).astype(np.float64) for i in range(16)], axis=0)
    return img, truth, r.expected_spots(scene)[0]


def ours(img, saturation):
    return distortion_from_grid_frame(img, GRID.points_mm(), F_COLL, NOMINAL, saturation=saturation)


def opencv(img):
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
    obj = np.column_stack([-pts[:, 0], -pts[:, 1], np.zeros(len(pts))]).astype(np.float32)
    ideal = np.column_stack([NOMINAL.fx * obj[:, 0] / F_COLL + 319.5, NOMINAL.fy * obj[:, 1] / F_COLL + 255.5])
    order = np.argmin(np.hypot(centers[:, None, 0] - ideal[None, :, 0], centers[:, None, 1] - ideal[None, :, 1]), axis=0)
    img_pts = centers[order].astype(np.float32)
    flags = cv2.CALIB_USE_INTRINSIC_GUESS | cv2.CALIB_FIX_K3
    _, K, D, _, _ = cv2.calibrateCamera([obj], [img_pts], (640, 512), NOMINAL.camera_matrix(), np.zeros(5), flags=flags)
    return K, D.ravel(), img_pts


def interleaved(fns, repeats=REPEATS):
    times = [[] for _ in fns]
    outs = [None] * len(fns)
    for _ in range(repeats):
        for i, fn in enumerate(fns):
            t = time.perf_counter()
            outs[i] = fn()
            times[i].append(time.perf_counter() - t)
    return [float(np.median(t)) for t in times], outs


# --- 3. dense grid, 4. scan mode, 5. the command ----------------------------------------------------

def dense_frame():
    base = demo_truth(defects=())
    g = base.geometry.replace(width=2560, height=2048, pixel_pitch_um=4.25, cx=base.geometry.cx * 4,
                              cy=base.geometry.cy * 4)
    truth = type(base)(**{**base.__dict__, "geometry": g})
    grid = PinholeGrid(rows=45, cols=61, pitch_mm=3.2, diameter_mm=0.5)
    scene = SceneState(source_c=60.0, plate_c=20.0, target=grid, collimator_focal_mm=F_COLL)
    img = CameraRenderer(truth, seed=1).render(scene, 0).astype(np.float64)
    return img, grid, truth, CameraGeometry(2560, 2048, 4.25, 25.0)


def main() -> None:
    print(f"machine: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f} (shared)")
    print("\n1. default frame path, centroid RMS over the Cramer-Rao bound (sigma 0.7 px spots, 320x256)")
    for snr in (20.0, 100.0):
        rms, bound = crlb_ratio(snr)
        print(f"   SNR {snr:5.0f}: RMS {rms:.4f} px, CRLB {bound:.4f} px, ratio {rms / bound:.3f}")

    print("\n2. 640x512, 15x11 grid, 16 frames averaged: nightbench vs OpenCV, medians of "
          f"{REPEATS} interleaved runs")
    img, truth, truth_xy = demo_frame()
    g = truth.geometry
    (t_ours, t_cv), (res, cv_out) = interleaved([lambda: ours(img, truth.full_scale), lambda: opencv(img)])
    print(f"   nightbench (detect + match + fit + figures): {t_ours * 1e3:7.1f} ms")
    if cv_out is None:
        print("   opencv: findCirclesGrid did not find the grid")
    else:
        K, D, cv_pts = cv_out
        print(f"   opencv (findCirclesGrid + calibrateCamera):  {t_cv * 1e3:7.1f} ms")
        print(f"   ratio opencv / nightbench: {t_cv / t_ours:.2f}  (> 1: nightbench faster; target >= 3)")
        ok = res.points.measured
        ours_c = float(np.sqrt(np.mean(np.sum((res.points.measured_px[ok] - truth_xy[ok]) ** 2, axis=1))))
        cv_c = float(np.sqrt(np.mean(np.sum((cv_pts - truth_xy) ** 2, axis=1))))
        m = res.model
        print(f"   centroid RMS vs truth: nightbench {ours_c:.4f} px, opencv {cv_c:.4f} px")
        print(f"   k1 error: nightbench {m.distortion.k1 - g.distortion.k1:+.1e} (sigma {m.sigma('k1'):.1e}), "
              f"opencv {D[0] - g.distortion.k1:+.1e}")
        print(f"   cx error: nightbench {m.cx - g.principal_point[0]:+.3f} px, opencv {K[0, 2] - g.principal_point[0]:+.3f} px")

    print("\n3. 61x45 grid (2,745 spots) on 2560x2048, single frame")
    dimg, dgrid, dtruth, dnom = dense_frame()
    dirs = collimator_directions(dgrid.points_mm(), F_COLL)
    (t_det, t_fit), (spots, _) = interleaved(
        [lambda: detect_spots(dimg, saturation=dtruth.full_scale), lambda: None], repeats=3)
    t0 = time.perf_counter()
    dres = analyze_grid(spots, dirs, dnom)
    t_fit = time.perf_counter() - t0
    print(f"   detect + centroid {t_det:.3f} s, match + fit + figures {t_fit:.3f} s, total {t_det + t_fit:.3f} s "
          f"(target < 1 s); {int(dres.points.measured.sum())} points, k1 {dres.model.distortion.k1:+.5f}")
    from analysis.matching import match_points

    times = {}
    for name, sp, d, nom in (("15x11", detect_spots(img, saturation=truth.full_scale),
                              collimator_directions(GRID.points_mm(), F_COLL), NOMINAL),
                             ("61x45", spots, dirs, dnom)):
        xy = np.array([[q.x, q.y] for q in sp])
        exp = project(nom, d)
        (t,), _ = interleaved([lambda: match_points(xy, exp)], repeats=5)
        times[name] = (t, len(exp))
    (t1, n1), (t2, n2) = times["15x11"], times["61x45"]
    print(f"   matching: {t1 * 1e3:.1f} ms for {n1} points, {t2 * 1e3:.1f} ms for {n2}: "
          f"time ~ points^{math.log(t2 / t1) / math.log(n2 / n1):.2f}")

    print("\n4. scan mode: centroid_at per pose on a 640x512 frame")
    from analysis.targets import SinglePinhole

    pin = SinglePinhole(diameter_mm=1.0)
    r = CameraRenderer(demo_truth(defects=()), seed=2)
    frames = []
    for az, el in ((-4.0, 3.0), (0.0, 0.0), (5.0, -2.0), (2.0, 4.0)):
        sc = SceneState(source_c=60.0, plate_c=20.0, target=pin, az_deg=az, el_deg=el, collimator_focal_mm=F_COLL)
        frames.append((r.render(sc, 0).astype(np.float64), r.expected_spots(sc)[0][0]))
    per = []
    for _ in range(25):
        for f, (x, y) in frames:
            t = time.perf_counter()
            centroid_at(f, x + 3.0, y - 2.0, search_px=25, saturation=16383)
            per.append(time.perf_counter() - t)
    print(f"   median {np.median(per) * 1e3:.2f} ms per pose (target < 5 ms)")

    print("\n5. `nightbench analyze distortion --frame` whole process vs `python -c pass`")
    import tifffile

    exe = Path(sys.executable).with_name("nightbench")
    with tempfile.TemporaryDirectory() as tmp:
        frame = Path(tmp) / "grid.tif"
        tifffile.imwrite(frame, img.astype(np.float32))
        cmd = [str(exe), "analyze", "distortion", "--frame", str(frame), "--geometry",
               str(ROOT / "station/data/example_geometry.yaml"), "--out", str(Path(tmp) / "out")]
        t_cmd, t_pass = [], []
        for _ in range(3):
            t = time.perf_counter()
            subprocess.run(cmd, check=True, capture_output=True)
            t_cmd.append(time.perf_counter() - t)
            t = time.perf_counter()
            subprocess.run([sys.executable, "-c", "pass"], check=True)
            t_pass.append(time.perf_counter() - t)
    print(f"   command {np.median(t_cmd):.2f} s (analysis proper {t_ours:.3f} s, python -c pass "
          f"{np.median(t_pass):.2f} s)")


if __name__ == "__main__":
    main()
