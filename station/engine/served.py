"""A station whose simulated bench is served by `nightbench simulate` in another process.

The station file `simulate` writes is the simulated station it serves, with every instrument's
resource pointing at the served instruments, the camera driven by `sim-camera-socket`, and a
`simulation: {served: {control: HOST:PORT}}` section in place of the bench physics: the run then
takes its simulated time from the served bench (`ServedClock`) instead of starting its own.

`TimeKeeper` keeps the served bench restartable: at every step's start and end it asks the bench
to mark its whole state; a resumed run, when its first open step starts, rewinds the bench to the
state in which that step began in the first session (time, blackbody, wheel, stage, camera).
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

import yaml

from station.record.atomic import write_text_atomic


def is_served(station: Any) -> bool:
    """True for a station whose simulated bench runs in `nightbench simulate`."""
    sim = getattr(station, "simulation", None)
    return bool(sim) and isinstance(sim.get("served"), Mapping)


def served_clock(station: Any) -> Any:
    """The served bench's clock (a connection to its control server)."""
    from simulators.served import ServedClock

    control = str(station.simulation["served"].get("control", ""))
    try:
        return ServedClock(control)
    except (OSError, ValueError) as exc:
        raise ValueError(f"{station.path}: no served simulated bench answers at {control!r} "
                         f"({exc}); start `nightbench simulate` and use the station file it "
                         "writes") from None


def served_station_mapping(station: Any, addresses: Mapping[str, str]) -> dict[str, Any]:
    """The station file text (as a mapping) for a served bench at `addresses`."""
    doc = yaml.safe_load(station.text)
    doc["station"] = f"{doc.get('station', 'simulated bench')} (served)"
    instruments = doc["instruments"]
    for role in ("blackbody", "wheel", "stage"):
        instruments[role]["resource"] = addresses[role]
    instruments["camera"] = {"driver": "sim-camera-socket", "resource": addresses["camera"]}
    for slot in (instruments["wheel"].get("slots") or {}).values():  # files named in targets
        target = (slot or {}).get("target") or {}
        for key in ("measured_csv", "drawing"):
            if key in target and not Path(str(target[key])).is_absolute():
                target[key] = str(station.base_dir / str(target[key]))
    doc["simulation"] = {"served": {"control": addresses["control"]}}
    return doc


def write_served_station(path: Path | str, mapping: Mapping[str, Any]) -> Path:
    head = ("# Written by `nightbench simulate`: the simulated bench served on loopback.\n"
            "# Valid while that process runs; its instruments keep their state between runs.\n")
    return write_text_atomic(Path(path).resolve(),
                             head + yaml.safe_dump(dict(mapping), sort_keys=False))


class TimeKeeper:
    """Event-log subscriber: marks the served bench at each step start/end; rewinds it once,
    when the first open step of a resumed run starts."""

    def __init__(self, clock: Any, run_key: str, rewind_to: str | None,
                 previous: str | None, emit: Any = None) -> None:
        self.clock = clock
        self.emit = emit
        self.run_key = run_key
        self.rewind_to = rewind_to
        self.previous = previous
        self.rewound: str | None = None

    def key(self, when: str, step: str) -> str:
        return f"{self.run_key}|{when}|{step}"

    def __call__(self, event: Mapping[str, Any]) -> None:
        kind, step = event.get("type"), event.get("step")
        if not isinstance(step, str):
            return
        if kind == "step.start":
            if step == self.rewind_to:
                self.rewind_to = None
                for key in ([self.key("after", self.previous)] if self.previous else []) + \
                        [self.key("start", step)]:
                    if self.clock.rewind(key):
                        self.rewound = key
                        break
                if self.emit is not None:  # say in the log whether the bench went back
                    self.emit("simulation.rewound" if self.rewound else "simulation.not_rewound",
                              at_step=step, mark=self.rewound,
                              why=None if self.rewound else "the served bench holds no mark of "
                              "this run (was it restarted?): the step runs from its present state")
            self.clock.mark(self.key("start", step))
        elif kind == "step.done":
            self.clock.mark(self.key("after", step))


def attach_time_keeper(run: Any, clock: Any, plan: Any,
                       completed: Mapping[str, Any] | None) -> TimeKeeper | None:
    """Subscribe a TimeKeeper to the run's events when the clock is a served bench's."""
    if not hasattr(clock, "mark") or not hasattr(clock, "rewind"):
        return None
    done = dict(completed or {})
    rewind_to = previous = None
    if done:
        for step in plan.steps:
            if step.id not in done:
                rewind_to = step.id
                break
            previous = step.id
    keeper = TimeKeeper(clock, Path(run.path).name, rewind_to, previous, run.events.emit)
    run.events.subscribe(keeper)
    return keeper


__all__ = ["TimeKeeper", "attach_time_keeper", "is_served", "served_clock",
           "served_station_mapping", "write_served_station"]
