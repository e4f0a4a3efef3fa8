"""`nightbench simulate`: the simulated bench as its own process, outliving the runs it serves.

    nightbench simulate [--station FILE] [--seed N] [--out STATION_FILE]

Starts the simulated blackbody, target wheel, stage and camera on 127.0.0.1, prints their
resource strings and writes a station file pointing at them; `nightbench run RECIPE --station
that_file` then drives them like a real bench. Instrument state (blackbody temperature, stage
pose, wheel slot, camera frame counter) lives in this process, so it survives a run being killed.
Stop it with Ctrl-C or SIGTERM.
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import TYPE_CHECKING, Any

from station.cli import exitcodes

if TYPE_CHECKING:
    from rich.console import Console


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("simulate", help="serve the simulated bench from its own process")
    p.add_argument("--station", type=Path, default=None,
                   help="simulated station file to serve (default: the built-in bench)")
    p.add_argument("--seed", type=int, default=1, help="seed of the simulated bench")
    p.add_argument("--out", type=Path, default=Path("served_station.yaml"),
                   help="where to write the station file that points at the served bench")
    p.add_argument("--realtime", type=float, default=None, metavar="SPEED",
                   help="also pace the served simulated time against the wall clock")


def cmd_simulate(args: argparse.Namespace, console: Console) -> int:
    from simulators.served import serve_forever
    from station.engine.prechecks import check_seed, check_speed
    from station.inputs.config import load_station

    check_seed(args.seed)
    check_speed(args.realtime)
    station = load_station(args.station)
    if not station.simulated:
        raise ValueError(f"{station.path}: not a simulated station (no 'simulation' section); "
                         "`simulate` serves the simulated bench a simulated station describes")
    from station.engine.served import served_station_mapping, write_served_station

    def ready(addresses: dict[str, str]) -> None:
        out = write_served_station(args.out, served_station_mapping(station, addresses))
        for role, resource in addresses.items():
            console.print(f"{role}: {resource}", highlight=False, markup=False)
        console.print(f"station file: {out}", highlight=False, markup=False)
        console.print("serving (the control line is the clock and the state marks); stop with "
                      "Ctrl-C", highlight=False, markup=False)

    serve_forever(station_mapping(station), seed=args.seed, ready=ready, speed=args.realtime)
    return exitcodes.OK


def station_mapping(station: Any) -> dict[str, Any]:
    """What the server needs of the station: bench physics, camera truth, slots, collimator."""
    from station.engine.bench import camera_truth

    return {"bench": dict(station.simulation.get("bench", {}) or {}),
            "truth": camera_truth(station),
            "slots": {n: s.target for n, s in station.slots.items()},
            "collimator_focal_mm": station.collimator_focal_mm}
