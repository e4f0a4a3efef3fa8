"""Fixtures: a simulated bench on SimClock with its three servers on 127.0.0.1."""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Any

import pytest

from drivers.clock import SimClock
from simulators.bench import SimBench
from simulators.servers import BenchServers, start_bench_servers

BB_SETTINGS = {"limits": {"min_c": 0.0, "max_c": 100.0, "min_difference_k": -20.0,
                          "max_difference_k": 60.0}, "safe_c": 22.0}
WHEEL_SETTINGS = {"slots": {1: {"name": "open"}, 2: {"name": "pinhole_grid"}, 3: "pinhole",
                            4: "slanted_edge", 5: "blank", 6: "spare"}}
STAGE_SETTINGS = {"axes": {"az": {"min": -40.0, "max": 40.0, "park": 0.0},
                           "el": {"min": -30.0, "max": 30.0, "park": 5.0}}}


@dataclass
class Sim:
    clock: SimClock
    bench: SimBench
    servers: BenchServers
    events: list[dict[str, Any]] = field(default_factory=list)

    def of_type(self, kind: str) -> list[dict[str, Any]]:
        return [e for e in self.events if e["type"] == kind]

    def sent(self) -> list[str]:
        return [e["command"] for e in self.of_type("io")]


@pytest.fixture
def sim() -> Iterator[Sim]:
    clock = SimClock()
    bench = SimBench.from_mapping({"blackbody": {"noise_mk": 2.0}}, clock, seed=3)
    with start_bench_servers(bench) as servers:
        yield Sim(clock, bench, servers)
