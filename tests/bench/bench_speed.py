"""Benchmark: where users wait, side by side in one run (medians over interleaved repetitions).

Prints, with the goals of issue 18 beside each figure (it asserts nothing about time):

- distortion analysis of the 640x512 frame of a 15x11 grid: nightbench against the OpenCV
  pipeline of bench_distortion.py (same frame; accuracy against the simulator's truth);
- the 61x45 grid on a 2560x2048 frame (goal < 1 s) and scan mode per pose (goal < 5 ms);
- `nightbench recipes`, `nightbench --help` (goal < 0.3 s) and `nightbench analyze distortion
  --frame` with and without plots (goal < 1 s) as whole processes, against `python -c pass`;
- simulated camera frames per second at 640x512 with the temperature changing every frame
  (goal >= 300);
- the overnight-soak dry run's ratio of planned to wall time (goal >= 2000x), from
  bench_overnight.py in its own process (skip it with --quick: it takes a minute or more).

    python tests/bench/bench_speed.py [--repeats 7] [--quick]

The machine is shared: medians of interleaved runs spread its load over all contenders; the
min-max spread says how noisy it was.
"""

from __future__ import annotations

import argparse
import os
import re
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import yaml

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
sys.path.insert(0, str(HERE))

import bench_camera  # noqa: E402  (the camera's frames-per-second loop)
import bench_distortion  # noqa: E402  (the OpenCV pipeline and the frame with its truth)
from analysis.centroid import centroid_at, detect_spots  # noqa: E402
from analysis.distortion import analyze_grid  # noqa: E402
from analysis.geometry import CameraGeometry, collimator_directions  # noqa: E402
from analysis.targets import PinholeGrid, SinglePinhole  # noqa: E402
from simulators.camera_render import CameraRenderer, SceneState  # noqa: E402
from simulators.camera_truth import truth_from_mapping  # noqa: E402

TRUTH = ROOT / "station" / "data" / "demo_camera_truth.yaml"
Row = tuple[str, list[float], str]


def interleaved(contenders: dict[str, Callable[[], object]], repeats: int) -> dict[str, list[float]]:
    """Wall seconds of each contender, run in turn (A B C A B C ...) after one warm-up each."""
    for fn in contenders.values():
        fn()
    times: dict[str, list[float]] = {name: [] for name in contenders}
    for _ in range(repeats):
        for name, fn in contenders.items():
            t0 = time.perf_counter()
            fn()
            times[name].append(time.perf_counter() - t0)
    return times


def line(name: str, values: list[float], goal: str, unit: str = "ms", scale: float = 1e3,
         base: float | None = None) -> str:
    med = statistics.median(values)
    ratio = f"{med / base:7.2f}x" if base else " " * 8
    return (f"  {name:<44} {med * scale:9.1f} {unit:<3} [{min(values) * scale:8.1f} .. "
            f"{max(values) * scale:8.1f}] {ratio}  {goal}")


def truth_640():
    truth = truth_from_mapping(yaml.safe_load(TRUTH.read_text(encoding="utf-8")))
    return type(truth)(**{**truth.__dict__, "geometry": truth.geometry.replace(defects=())})


def grid_640(repeats: int) -> None:
    img, truth, truth_xy = bench_distortion.demo_frame()
    times = interleaved({"nightbench": lambda: bench_distortion.ours(img, truth.full_scale),
                         "opencv": lambda: bench_distortion.opencv(img)}, repeats)
    ours = bench_distortion.ours(img, truth.full_scale)
    cv_out = bench_distortion.opencv(img)
    print("distortion analysis, 640x512 frame, 15x11 grid (goal: nightbench >= 3x faster than "
          "OpenCV, same or better accuracy)")
    base = statistics.median(times["nightbench"])
    print(line("nightbench distortion_from_grid_frame", times["nightbench"], ""))
    print(line("OpenCV findCirclesGrid + calibrateCamera", times["opencv"],
               "(OpenCV / nightbench)", base=base))
    ok = ours.points.measured
    rms = float(np.sqrt(np.mean(np.sum((ours.points.measured_px[ok] - truth_xy[ok]) ** 2, 1))))
    k1 = truth.geometry.distortion.k1
    text = f"  accuracy: nightbench centroid RMS {rms:.4f} px, k1 error {ours.model.distortion.k1 - k1:+.1e}"
    if cv_out is not None:
        K, D, cv_pts = cv_out
        cv_rms = float(np.sqrt(np.mean(np.sum((cv_pts - truth_xy) ** 2, axis=1))))
        text += f"; OpenCV {cv_rms:.4f} px, k1 error {D[0] - k1:+.1e}"
    else:
        text += "; OpenCV did not find the grid"
    print(text)


def dense_grid(repeats: int) -> None:
    """61x45 pinholes on a 2560x2048 detector (pitch 4.25 um: the 640x512 field, 4x finer)."""
    base = truth_640()
    g = base.geometry
    geometry = g.replace(width=2560, height=2048, pixel_pitch_um=g.pixel_pitch_um / 4,
                         cx=(g.cx + 0.5) * 4 - 0.5, cy=(g.cy + 0.5) * 4 - 0.5)
    # blur above the diffraction spot of the finer pixels (about 1 px at f/1)
    truth = type(base)(**{**base.__dict__, "geometry": geometry, "blur_sigma_px": 1.2})
    grid = PinholeGrid(rows=45, cols=61, pitch_mm=3.2, diameter_mm=0.5)
    scene = SceneState(source_c=60.0, plate_c=20.0, target=grid,
                       collimator_focal_mm=bench_distortion.F_COLL)
    img = CameraRenderer(truth, seed=1).render(scene, 0).astype(np.float64)
    nominal = CameraGeometry(2560, 2048, g.pixel_pitch_um / 4, 25.0)
    dirs = collimator_directions(grid.points_mm(), bench_distortion.F_COLL)

    def ours():
        return analyze_grid(detect_spots(img, saturation=truth.full_scale), dirs, nominal)

    print(f"61x45 grid ({grid.rows * grid.cols} pinholes) on 2560x2048 (goal < 1 s)")
    t0 = time.perf_counter()
    try:
        result = ours()
    except Exception as exc:  # the figure is what matters here: say why there is none
        print(f"  analysis failed after {time.perf_counter() - t0:.2f} s: "
              f"{type(exc).__name__}: {exc}")
        return
    times = interleaved({"dense": ours}, max(3, repeats // 2))
    found = int(np.count_nonzero(result.points.measured))
    print(line(f"detect_spots + analyze_grid ({found} measured)", times["dense"], "< 1000 ms"))


def scan_pose(repeats: int) -> None:
    """The per-pose work of scan mode: one centroid near the predicted spot on a whole frame."""
    truth = truth_640()
    renderer = CameraRenderer(truth, seed=3)
    scene = SceneState(source_c=50.0, plate_c=20.0, target=SinglePinhole(diameter_mm=1.0),
                       az_deg=3.3, el_deg=-1.7, collimator_focal_mm=500.0)
    frame = renderer.render(scene, 0).astype(np.float64)
    (x, y), = renderer.expected_spots(scene)[0]
    times = interleaved({"pose": lambda: centroid_at(frame, float(x) + 1.5, float(y) - 1.0,
                                                      search_px=25)}, repeats * 10)
    print("scan mode, per pose (goal < 5 ms)")
    print(line("centroid_at on a 640x512 frame", times["pose"], "< 5 ms"))


def camera_fps(frames: int = 300) -> None:
    truth = truth_from_mapping(yaml.safe_load(TRUTH.read_text(encoding="utf-8")))
    grid = PinholeGrid(rows=11, cols=15, pitch_mm=27.0, diameter_mm=0.5)
    wall_fps, cpu_fps = bench_camera.fps_with_changing_temperature(CameraRenderer(truth), grid,
                                                                   frames)
    print("simulated camera, 640x512, 15x11 grid, temperature changing every frame "
          "(goal >= 300 frames/s)")
    print(f"  {wall_fps:9.1f} frames/s wall ({1e3 / wall_fps:.2f} ms/frame), "
          f"{cpu_fps:.1f} frames per CPU second")

def nightbench() -> list[str]:
    script = Path(sys.executable).with_name("nightbench")
    return [str(script)] if script.exists() else [sys.executable, "-m", "station"]


def run_quiet(cmd: list[str]) -> None:
    subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True,
                   env={**os.environ, "COLUMNS": "100"})


def grid_frame_files(folder: Path) -> tuple[Path, Path]:
    """A 640x512 averaged grid frame of the built-in simulated bench, and the example geometry."""
    import tifffile

    img, _, _ = bench_distortion.demo_frame()
    frame = folder / "grid.tif"
    tifffile.imwrite(frame, img.astype(np.float32))
    geometry = ROOT / "station" / "data" / "example_geometry.yaml"  # the same bench and grid
    return frame, geometry


def commands(repeats: int) -> None:
    nb = nightbench()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        frame, geometry = grid_frame_files(folder)
        count = iter(range(10**6))

        def analyze(*extra: str) -> Callable[[], None]:
            return lambda: run_quiet(nb + ["analyze", "distortion", "--frame", str(frame),
                                           "--geometry", str(geometry), "--out",
                                           str(folder / f"out{next(count)}"), *extra])

        contenders = {
            "python -c pass": lambda: run_quiet([sys.executable, "-c", "pass"]),
            "nightbench recipes": lambda: run_quiet(nb + ["recipes"]),
            "nightbench --help": lambda: run_quiet(nb + ["--help"]),
            "analyze distortion --frame (plots)": analyze(),
            "analyze distortion --frame --no-plots": analyze("--no-plots"),
        }
        times = interleaved(contenders, repeats)
    base = statistics.median(times["python -c pass"])
    goals = {"nightbench recipes": "< 300 ms", "nightbench --help": "< 300 ms",
             "analyze distortion --frame (plots)": "< 1000 ms",
             "analyze distortion --frame --no-plots": ""}
    print(f"whole process, median of {repeats} interleaved runs (ratio to python -c pass)")
    for name, values in times.items():
        print(line(name, values, goals.get(name, ""), base=None if name.startswith("python")
                   else base))


def overnight() -> None:
    out = subprocess.run([sys.executable, str(HERE / "bench_overnight.py")], text=True,
                         capture_output=True, cwd=ROOT)
    ratio = re.search(r"ratio (\d+)x", out.stdout)
    wall = re.search(r"wall ([\d.]+) s", out.stdout)
    print("overnight-soak dry run, in its own process (goal >= 2000x)")
    if ratio and wall:
        print(f"  planned / wall: {ratio.group(1)}x  (wall {wall.group(1)} s)")
    else:
        print("  did not finish:", (out.stdout + out.stderr).strip().splitlines()[-3:])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=7)
    parser.add_argument("--quick", action="store_true", help="skip the overnight dry run")
    args = parser.parse_args()
    load = os.getloadavg()[0]
    print(f"{os.cpu_count()} CPUs, load average {load:.1f} at the start; "
          f"median [min .. max]")
    grid_640(args.repeats)
    dense_grid(args.repeats)
    scan_pose(args.repeats)
    camera_fps()
    commands(args.repeats)
    if not args.quick:
        overnight()
    print(f"load average {os.getloadavg()[0]:.1f} at the end")


if __name__ == "__main__":
    main()
