"""Benchmark: memory and speed of streaming captures to the frame store.

Prints, for 100 and 1000 frames of 640x512 uint16 (a common thermal format), the peak Python
memory traced by tracemalloc while capturing (average only, and stack + average), the write rate
and the file sizes. The claim checked: averaging holds one float64 accumulator (2.6 MB for
640x512), whatever the number of frames; the frames themselves are never held.

Run: python3 tests/bench/bench_frame_store.py [--frames 100 1000] [--keep-files]
"""

from __future__ import annotations

import argparse
import shutil
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np

from drivers.clock import SimClock
from drivers.interfaces import Frame
from station.record.frame_store import CaptureWriter

ROWS, COLS = 512, 640


def one_capture(root: Path, n: int, keep: str) -> dict[str, float]:
    """Capture `n` frames; returns peak traced memory (MB), wall time (s), frames/s, MB on disk."""
    clock = SimClock()
    rng = np.random.default_rng(5)
    # Eight distinct frames cycled: realistic content without holding n frames in the benchmark.
    pool = [rng.integers(0, 2 ** 14, (ROWS, COLS), dtype=np.uint16) for _ in range(8)]
    frames_dir = root / f"{keep}_{n}" / "frames"
    tracemalloc.start()
    tracemalloc.reset_peak()
    t0 = time.perf_counter()
    writer = CaptureWriter(frames_dir, f"bench.{keep}.{n}", f"bench_{keep}_{n}", keep,
                           expected_count=n, clock=clock)
    for i in range(n):
        writer.add(Frame(pool[i % 8], i, clock.now()), readings={"difference_K": 5.0})
        clock.sleep(1 / 30)
    record = writer.finish()
    wall = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    disk = sum(record.sizes.values()) + record.metadata_path.stat().st_size
    return {"peak_mb": peak / 1e6, "wall_s": wall, "fps": n / wall, "disk_mb": disk / 1e6}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--frames", type=int, nargs="+", default=[100, 1000])
    parser.add_argument("--keep-files", action="store_true")
    args = parser.parse_args()
    root = Path(tempfile.mkdtemp(prefix="nightbench-bench-"))
    frame_mb = ROWS * COLS * 2 / 1e6
    print(f"frame {COLS}x{ROWS} uint16 = {frame_mb:.2f} MB; float64 accumulator = "
          f"{ROWS * COLS * 8 / 1e6:.2f} MB; folder {root}")
    print(f"{'keep':<8} {'frames':>6} {'peak MB':>8} {'held frames':>11} {'wall s':>7} "
          f"{'frames/s':>9} {'disk MB':>8}")
    try:
        for keep in ("average", "both"):
            for n in args.frames:
                r = one_capture(root, n, keep)
                print(f"{keep:<8} {n:>6} {r['peak_mb']:>8.1f} {r['peak_mb'] / frame_mb:>11.1f} "
                      f"{r['wall_s']:>7.2f} {r['fps']:>9.0f} {r['disk_mb']:>8.1f}")
    finally:
        if not args.keep_files:
            shutil.rmtree(root, ignore_errors=True)


if __name__ == "__main__":
    main()
