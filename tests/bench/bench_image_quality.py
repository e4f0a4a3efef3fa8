"""Benchmark: image-quality analyses on demo-camera frames (not a timed test).

Prints wall time (median of 5 runs) and peak Python memory (tracemalloc) of:
* the slanted-edge MTF of one 640x512 frame (ROI found automatically);
* the 3-D noise of a 64-frame 640x512 stack;
* the bad-pixel map from two 16-frame 640x512 flats;
* the NETD from three 16-frame flats.
Run: python3 tests/bench/bench_image_quality.py
"""

from __future__ import annotations

import statistics
import time
import tracemalloc
from collections.abc import Callable
from pathlib import Path

import numpy as np
import yaml

from analysis.badpixels import bad_pixel_map
from analysis.mtf import slanted_edge_mtf
from analysis.netd import measure_netd
from analysis.noise3d import noise_3d, replace_bad_pixels
from analysis.targets import OpenAperture, SlantedEdge
from simulators.camera_render import CameraRenderer, SceneState
from simulators.camera_truth import truth_from_mapping

TRUTH = Path(__file__).resolve().parents[2] / "station" / "data" / "demo_camera_truth.yaml"


def _measure(fn: Callable[[], object], repeats: int = 5) -> tuple[float, float]:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    tracemalloc.start()
    fn()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return statistics.median(times), peak / 1e6


def main() -> None:
    truth = truth_from_mapping(yaml.safe_load(TRUTH.read_text()))
    r = CameraRenderer(truth, seed=1)

    def stack(t: float, n: int, key: str) -> np.ndarray:
        return np.stack([r.render(SceneState(t, 20.0, OpenAperture()), i, key)
                         for i in range(n)])

    edge = r.render(SceneState(40.0, 20.0, SlantedEdge(5.0)), 0, "edge")
    cube = stack(30.0, 64, "noise")
    flats = [stack(t, 16, f"flat{t}") for t in (26.0, 30.0, 34.0)]
    bad = bad_pixel_map(flats[0], flats[2])
    rows = [
        ("MTF, one 640x512 frame", lambda: slanted_edge_mtf(edge)),
        ("3-D noise, 64 x 640x512", lambda: noise_3d(cube, 97.4)),
        ("bad-pixel map, 2 x 16 x 640x512", lambda: bad_pixel_map(flats[0], flats[2])),
        ("NETD, 3 x 16 x 640x512", lambda: measure_netd(
            (26.0, 30.0, 34.0), flats, truth.band_um, at_c=30.0, bad_pixel_mask=bad.mask)),
    ]
    print(f"{'analysis':36s} {'median time':>12s} {'peak memory':>12s}")
    for name, fn in rows:
        t, mem = _measure(fn)
        print(f"{name:36s} {t * 1e3:9.1f} ms {mem:9.1f} MB")
    n = noise_3d(cube, truth.sitf_counts_per_k(30.0))
    fixed = noise_3d(replace_bad_pixels(cube, bad.mask), truth.sitf_counts_per_k(30.0))
    print(f"3-D noise sigma_tvh {n.in_mk()['tvh']:.2f} mK with the bad pixels inside the cube, "
          f"{fixed.in_mk()['tvh']:.2f} mK with them replaced (truth NETD 50.0 mK, + ADC rounding)")


if __name__ == "__main__":
    main()
