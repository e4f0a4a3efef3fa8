"""Checks made before a run folder exists: a run that cannot start leaves nothing on disk.

Why: a folder created for a run that then fails on its seed or on the simulated camera's truth
file stays behind at `running`, looking like an interrupted run. Everything that can be known
from the inputs alone is checked here, first; each problem is a ValueError (exit code 2) naming
the option or file and what to do.

Example::

    check_run_inputs(inputs, seed=1, runs_root=Path("runs"))
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

MAX_SEED = 2**63 - 1


def check_seed(seed: Any) -> int:
    """A seed numpy's SeedSequence takes: a whole number from 0 to 2**63 - 1."""
    if isinstance(seed, bool) or not isinstance(seed, int) or not 0 <= seed <= MAX_SEED:
        raise ValueError(f"--seed {seed!r}: give a whole number from 0 to {MAX_SEED}")
    return seed


def check_speed(speed: float | None) -> float | None:
    """--realtime SPEED: a finite number above zero (simulated seconds per real second)."""
    if speed is not None and not (math.isfinite(speed) and speed > 0):
        raise ValueError(f"--realtime {speed}: give a finite speed above 0 (1 = real time, "
                         "10 = ten times faster)")
    return speed


def check_runs_root(runs_root: Path) -> None:
    """The folder that will hold run folders: a folder (or nothing yet), never a file, and not
    inside a run folder."""
    root = Path(runs_root)
    if root.exists() and not root.is_dir():
        raise ValueError(f"--runs {root}: is a file, not a folder; give the folder where run "
                         "folders go (it is created if missing)")
    from station.record.runfolder import is_run_folder

    for parent in [root.resolve(), *root.resolve().parents]:
        if is_run_folder(parent):
            raise ValueError(f"--runs {root}: is inside the run folder {parent}; a run folder "
                             "holds one run only. Give a folder outside it.")


def check_simulated_camera(inputs: Any) -> None:
    """An in-process simulated station: its camera truth file reads, and its frame format is the
    UUT's (a 320 px wide UUT on a 640 px camera would be analysed with the wrong geometry)."""
    station = inputs.station
    if not station.simulated or not _in_process(station):
        return
    from station.engine.bench import camera_truth

    try:
        truth = camera_truth(station)
    except ValueError:
        raise
    except Exception as exc:  # a truth file of the wrong shape: name it, do not crash
        raise ValueError(f"{station.path}: the simulated camera's truth file cannot be used "
                         f"({type(exc).__name__}: {exc})") from None
    check_frame_format((truth.geometry.height, truth.geometry.width), inputs.uut,
                       "the simulated camera")


def check_frame_format(shape: tuple[int, int], uut: Any, camera: str) -> None:
    """The UUT file's format (width x height) must be the frames' (rows, cols)."""
    rows, cols = int(shape[0]), int(shape[1])
    if (rows, cols) != (int(uut.height), int(uut.width)):
        raise ValueError(f"UUT {uut.serial}: the UUT file says {uut.width} x {uut.height} px "
                         f"(width x height) but {camera} delivers {cols} x {rows} px frames; "
                         "correct the UUT file's format (or connect the right camera)")


def _in_process(station: Any) -> bool:
    return station.instruments["camera"].resource.startswith("sim")


def check_run_inputs(inputs: Any, *, seed: Any, runs_root: Path) -> None:
    """Everything `nightbench run` can check before it creates the run folder."""
    check_seed(seed)
    check_runs_root(runs_root)
    check_simulated_camera(inputs)


__all__ = ["check_frame_format", "check_run_inputs", "check_runs_root", "check_seed",
           "check_simulated_camera", "check_speed"]
