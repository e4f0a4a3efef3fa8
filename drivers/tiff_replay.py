"""Frame grabber that replays recorded frames: a folder of TIFF files or a run's captures.

Re-running a recipe's analysis on recorded data needs the frames served exactly as they were
grabbed. Station entry::

    camera:
      driver: tiff-replay
      resource: replay:runs/2026-01-05T2210Z_LW0042_distortion-grid/frames
      pattern: "*.tif"            # optional; default every .tif/.tiff file
      frame_rate: 30              # optional; default from the metadata, else 30
      loop: false                 # start again after the last frame instead of failing

Order: a capture of the run folder (`<name>.stack.tif` beside `<name>.json`) serves its pages in
page order with the counters and timestamps recorded in the JSON; captures follow one another in
the order of their first timestamp. Other TIFF files are served in natural name order
(frame_2 before frame_10), every page of a multi-page file in turn, counted from 1.
"""

from __future__ import annotations

import json
import re
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from drivers.errors import InstrumentConnectionError, InstrumentError
from drivers.interfaces import Frame, FrameGrabber
from drivers.scpi import SettingsError

STACK_SUFFIX = ".stack.tif"


@dataclass(frozen=True)
class ReplayItem:
    """One frame to serve: which file, which page, and its recorded counter and time if any."""

    path: Path
    page: int
    counter: int | None
    timestamp: float | None


def natural_key(path: Path) -> list[Any]:
    """Sort key treating digit runs as numbers: frame_2.tif before frame_10.tif."""
    return [int(part) if part.isdigit() else part.lower()
            for part in re.split(r"(\d+)", path.name)]


def _pages(path: Path) -> int:
    import tifffile

    with tifffile.TiffFile(path) as tif:
        return len(tif.pages)


def _capture_items(stack: Path) -> tuple[list[ReplayItem], float]:
    """Items of one run-folder capture, and its first timestamp (for ordering captures)."""
    meta_path = stack.with_name(stack.name[: -len(STACK_SUFFIX)] + ".json")
    pages = _pages(stack)
    counters: list[Any] = []
    stamps: list[Any] = []
    if meta_path.is_file():
        try:
            meta = json.loads(meta_path.read_text(encoding="utf-8"))
            counters, stamps = list(meta.get("counters") or []), list(meta.get("timestamps") or [])
        except (OSError, ValueError):
            counters, stamps = [], []
    items = [ReplayItem(stack, i, int(counters[i]) if i < len(counters) else None,
                        float(stamps[i]) if i < len(stamps) else None) for i in range(pages)]
    first = items[0].timestamp if items and items[0].timestamp is not None else float("inf")
    return items, first


def replay_items(folder: Path, pattern: str | None = None) -> list[ReplayItem]:
    """Every frame in `folder` in serving order (see the module docstring)."""
    files = sorted((p for p in folder.glob(pattern or "*") if p.is_file()
                    and p.suffix.lower() in (".tif", ".tiff")
                    and not p.name.endswith(".avg.tif")), key=natural_key)
    captures: list[tuple[float, str, list[ReplayItem]]] = []
    loose: list[ReplayItem] = []
    for path in files:
        if path.name.endswith(STACK_SUFFIX):
            items, first = _capture_items(path)
            captures.append((first, path.name, items))
        else:
            loose.extend(ReplayItem(path, i, None, None) for i in range(_pages(path)))
    ordered = [item for _, _, items in sorted(captures, key=lambda c: (c[0], c[1]))
               for item in items]
    return ordered + loose


class TiffReplayGrabber(FrameGrabber):
    """Serves recorded TIFF frames in a stable order with their recorded counters."""

    KIND = "camera"
    SETTINGS = {
        "resource": "replay:<folder> (relative to the station file): TIFF files or a run's "
                    "frames/ folder",
        "pattern": "glob of files to serve (default every .tif/.tiff)",
        "frame_rate": "frames per second (default: from the recorded timestamps, else 30)",
        "bit_depth": "bits per pixel (default 16 for 16-bit files, 8 for 8-bit)",
        "loop": "start again after the last frame (default false)",
    }

    def __init__(self, transport: None = None, *, name: str = "camera",
                 settings: Mapping[str, Any] | None = None) -> None:
        settings = dict(settings or {})
        problems = self.validate_settings(settings)
        if problems:
            raise SettingsError(f"{name}: " + "; ".join(problems))
        self.name = name
        text = str(settings["resource"]).strip()
        folder = Path(text[len("replay:"):] if text.startswith("replay:") else text)
        if not folder.is_absolute() and settings.get("base_dir") is not None:
            folder = Path(settings["base_dir"]) / folder
        if not folder.is_dir():
            raise InstrumentConnectionError(name, f"replay folder {folder} not found",
                                            hint="check the camera resource in the station file")
        self.folder = folder
        self.items = replay_items(folder, settings.get("pattern"))
        if not self.items:
            raise InstrumentConnectionError(
                name, f"no TIFF frames in {folder} (pattern {settings.get('pattern') or '*'})",
                hint="point the resource at a folder of .tif files or a run's frames/ folder")
        self.loop = bool(settings.get("loop", False))
        self._next = 0
        self._served = 0
        self._last_counter = 0
        self._wrapped = False
        first = self._load(self.items[0])
        self._shape = (int(first.shape[0]), int(first.shape[1]))
        self._bit_depth = int(settings.get("bit_depth") or (8 * first.dtype.itemsize
                                                            if first.dtype.kind in "ui" else 16))
        stamps = [i.timestamp for i in self.items if i.timestamp is not None]
        recorded = (len(stamps) - 1) / (stamps[-1] - stamps[0]) if (
            len(stamps) > 1 and stamps[-1] > stamps[0]) else None
        self._rate = float(settings.get("frame_rate") or recorded or 30.0)

    @classmethod
    def validate_settings(cls, settings: Mapping[str, Any]) -> list[str]:
        problems = []
        if not str(settings.get("resource", "")).strip():
            problems.append("resource: missing; give replay:<folder of TIFF frames>")
        rate = settings.get("frame_rate")
        if rate is not None and (not isinstance(rate, (int, float)) or rate <= 0):
            problems.append(f"frame_rate: must be a positive number, not {rate!r}")
        return problems

    def _load(self, item: ReplayItem) -> np.ndarray:
        import tifffile

        data = tifffile.imread(item.path, key=item.page)
        if data.ndim != 2:
            raise InstrumentError(self.name, f"{item.path.name} page {item.page} has shape "
                                  f"{data.shape}; replay serves single-channel (rows, cols) frames")
        return data

    def identify(self) -> str:
        return f"TIFF replay of {self.folder} ({len(self.items)} frames)"

    def grab(self, count: int) -> Iterator[Frame]:
        """The next `count` recorded frames; running out (without loop) is an InstrumentError."""
        if count < 0:
            raise ValueError(f"{self.name}: frame count must be >= 0, got {count}")
        for i in range(int(count)):
            if self._next >= len(self.items):
                if not self.loop:
                    raise InstrumentError(self.name, f"replay ran out after {len(self.items)} "
                                          f"frames ({i} of {count} grabbed)",
                                          hint="set loop: true or record more frames")
                self._next = 0
                self._wrapped = True
            item = self.items[self._next]
            self._next += 1
            data = self._load(item)
            if data.shape != self._shape:
                raise InstrumentError(self.name, f"{item.path.name} page {item.page} is "
                                      f"{data.shape}, the replay started with {self._shape}")
            # recorded counters as recorded; after a wrap-around they keep rising instead
            recorded = item.counter if not self._wrapped else None
            counter = recorded if recorded is not None else self._last_counter + 1
            self._last_counter = counter
            self._served += 1
            stamp = item.timestamp if item.timestamp is not None else (self._served - 1) / self._rate
            yield Frame(data=data, counter=counter, timestamp=stamp,
                        meta={"file": item.path.name, "page": item.page})

    def snapshot(self) -> dict[str, Any]:
        return {"served": self._served, "remaining": len(self.items) - self._next}
