"""How fast the command line answers: `nightbench recipes` and `nightbench --help`, whole process,
against `python -c pass` (the interpreter's own start), as medians of interleaved runs.

Interleaving (pass, recipes, help, pass, recipes, help, ...) spreads the load of a shared machine
evenly over the three. Prints figures only; asserts nothing about time (goal: under 0.3 s each).

    python tests/bench/bench_cli_startup.py [--repeats 15]
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import time
from pathlib import Path


def nightbench_command() -> list[str]:
    script = Path(sys.executable).with_name("nightbench")
    if script.exists():
        return [str(script)]
    found = shutil.which("nightbench")
    return [found] if found else [sys.executable, "-m", "station"]


def wall_time(cmd: list[str]) -> float:
    start = time.perf_counter()
    subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True,
                   env={**os.environ, "COLUMNS": "100"})
    return time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=15)
    args = parser.parse_args()
    nb = nightbench_command()
    commands = {"python -c pass": [sys.executable, "-c", "pass"],
                "nightbench recipes": nb + ["recipes"],
                "nightbench --help": nb + ["--help"],
                "nightbench --version": nb + ["--version"]}
    for cmd in commands.values():  # warm the file cache and the byte-code
        wall_time(cmd)
    times: dict[str, list[float]] = {name: [] for name in commands}
    for _ in range(args.repeats):
        for name, cmd in commands.items():
            times[name].append(wall_time(cmd))
    base = statistics.median(times["python -c pass"])
    print(f"whole-process wall time, median of {args.repeats} interleaved runs "
          f"({os.cpu_count()} CPUs, load average {os.getloadavg()[0]:.1f})")
    print(f"{'command':<24} {'median s':>9} {'min s':>7} {'over python':>12}")
    for name, values in times.items():
        median = statistics.median(values)
        extra = "" if name.startswith("python") else f"{median - base:+.3f} s"
        print(f"{name:<24} {median:9.3f} {min(values):7.3f} {extra:>12}")
    print("goal: nightbench recipes and --help under 0.3 s whole process")


if __name__ == "__main__":
    main()
