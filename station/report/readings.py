"""Instrument readings against time, from the event log and the captures' metadata.

Two sources, both already in the run folder: the replies to the blackbody's and stage's read-back
queries in events.jsonl (dense, every poll), and the readings every capture recorded at its start
and end (frames/*.json: driver independent). The frame rate is measured per capture from the
frame timestamps, (n - 1) / (t_last - t_first).
"""

from __future__ import annotations

import json
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from station.record.events import read_events

QUERY_SERIES = {"MEAS:TEMP?": ("blackbody", "source"), "MEAS:REF?": ("blackbody", "reference")}
AXIS_QUERY = re.compile(r"^POS\?\s+(\w+)$")
PANELS = (("blackbody", "blackbody (C)"), ("stage", "stage axes"), ("camera", "frame rate (Hz)"))
SERIES_COLOURS = ("#1f5fa8", "#e07b00", "#2a9d4b", "#c0282d", "#7b4fa8", "#555555")  # our own


@dataclass
class Series:
    """One reading over time: ``t`` in seconds from the run's first event."""

    panel: str
    name: str
    t: list[float] = field(default_factory=list)
    v: list[float] = field(default_factory=list)


def _add(series: dict[tuple[str, str], Series], panel: str, name: str, t: float,
         value: Any) -> None:
    try:
        number = float(value)
    except (TypeError, ValueError):
        return
    s = series.setdefault((panel, name), Series(panel, name))
    s.t.append(t)
    s.v.append(number)


def _from_events(events: Iterable[Mapping[str, Any]], t0: float,
                 series: dict[tuple[str, str], Series]) -> None:
    for e in events:
        if e.get("type") != "io" or "reply" not in e:
            continue
        command = str(e.get("command", ""))
        t = float(e.get("t", t0)) - t0
        if command in QUERY_SERIES:
            _add(series, *QUERY_SERIES[command], t, e["reply"])
        elif e.get("instrument") == "stage" and (m := AXIS_QUERY.match(command)):
            _add(series, "stage", m.group(1), t, e["reply"])


def _from_captures(run: Path, t0: float, series: dict[tuple[str, str], Series],
                   dense: set[str]) -> None:
    for path in sorted((run / "frames").glob("*.json")):
        try:
            meta = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue
        if not isinstance(meta, dict) or meta.get("format") != "nightbench-capture":
            continue
        stamps = [float(x) for x in meta.get("timestamps") or [] if x is not None]
        if len(stamps) >= 2 and stamps[-1] > stamps[0]:
            rate = (len(stamps) - 1) / (stamps[-1] - stamps[0])
            _add(series, "camera", "measured", (stamps[0] + stamps[-1]) / 2 - t0, rate)
        extra = meta.get("extra") or {}
        for which, t_key in (("readings_start", "start_t"), ("readings_end", "end_t")):
            readings = extra.get(which) or {}
            t = float(meta.get(t_key, t0)) - t0
            bb = readings.get("blackbody") or {}
            if "blackbody" not in dense:
                _add(series, "blackbody", "source", t, bb.get("temperature_c"))
                _add(series, "blackbody", "reference", t, bb.get("reference_c"))
            stage = readings.get("stage") or {}
            if "stage" not in dense:
                for axis, value in stage.items():
                    if axis != "states":
                        _add(series, "stage", str(axis), t, value)
            _add(series, "camera", "nominal", t, (readings.get("camera") or {}).get(
                "frame_rate_hz"))


def read_series(run: Path) -> list[Series]:
    """Every reading series of a run folder, sorted by time."""
    run = Path(run)
    events = read_events(run / "events.jsonl") if (run / "events.jsonl").is_file() else []
    t0 = float(events[0].get("t", 0.0)) if events else 0.0
    series: dict[tuple[str, str], Series] = {}
    _from_events(events, t0, series)
    dense = {panel for panel, _ in series}
    _from_captures(run, t0, series, dense)
    for s in series.values():
        order = sorted(range(len(s.t)), key=s.t.__getitem__)
        s.t, s.v = [s.t[i] for i in order], [s.v[i] for i in order]
    return list(series.values())


def plot_series(series: list[Series]) -> bytes | None:
    """One SVG (UTF-8 bytes), a panel per instrument sharing the time axis; None when nothing
    was read. Drawn by analysis.svg_plot: writing a report loads no plotting library."""
    from analysis.svg_plot import Figure, nice_ticks

    panels = [(p, label) for p, label in PANELS if any(s.panel == p and s.t for s in series)]
    if not panels:
        return None
    span = max((s.t[-1] for s in series if s.t), default=0.0)
    scale, unit = (3600.0, "h") if span > 7200 else (60.0, "min") if span > 120 else (1.0, "s")
    xt, xn = nice_ticks(0.0, max(span / scale, 1e-9), 8)
    ph, gap, top = 170, 34, 20
    fig = Figure(820, top + len(panels) * (ph + gap) + 40,
                 description="instrument readings against time")
    for k, (panel, label) in enumerate(panels):
        mine = [s for s in series if s.panel == panel and s.t]
        values = [v for s in mine for v in s.v]
        lo, hi = min(values), max(values)
        if panel == "camera":
            lo, hi = 0.9 * lo, 1.1 * hi
        yt, yn = nice_ticks(lo, hi, 5)
        y0 = top + k * (ph + gap)
        ax = fig.axes((90, y0, 520, ph), (xt[0], xt[-1]), (yt[0], yt[-1]))
        for i, s in enumerate(mine):
            colour = SERIES_COLOURS[i % len(SERIES_COLOURS)]
            ts = [t / scale for t in s.t]
            if panel == "camera" or len(s.t) < 3:
                ax.markers(ts, s.v, shape="dot", size=5, colour=colour, label=s.name,
                           cls=f"series-{panel}")
            else:
                ax.line(ts, s.v, colour=colour, width=1.2, label=s.name, cls=f"series-{panel}")
        last = k == len(panels) - 1
        ax.ticks(xt, yt, xnfrac=xn, ynfrac=yn, size=10, ylabel=label,
                 xlabel=f"time from the start of the run ({unit})" if last else "")
        fig.legend(90 + 520 + 14, y0, ax.legend_entries, size=10)
    return fig.to_svg().encode("utf-8")
