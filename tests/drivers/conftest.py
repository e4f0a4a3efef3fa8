"""Fixtures: a simulated bench on SimClock with its three servers on 127.0.0.1; the invented
TB-7 blackbody (tests/drivers/invented_blackbody.py) on a real socket in real time."""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Any

import random
import threading
import time

import pytest

from drivers.clock import RealClock, SimClock
from simulators.bench import SimBench
from simulators.line_server import LineServer, Response
from simulators.servers import BenchServers, BlackbodyProtocol, start_bench_servers

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


class LateReplies:
    """A fifth of the replies 200 ms late (seeded), the rest at once: the issue's fake."""

    def __init__(self, protocol: BlackbodyProtocol, seed: int = 7) -> None:
        self.protocol, self.rng = protocol, random.Random(seed)
        self.late = 0
        self.lock = threading.Lock()

    def __call__(self, line: str) -> Response:
        with self.lock:
            late = self.rng.random() < 0.2
            self.late += late
        if late:
            time.sleep(0.2)  # the instrument's own latency, in the server thread
        return self.protocol(line)


# Fast physics so a real-time test takes seconds: first-order lag tau = 50 ms, stable within
# 20 mK held for 0.2 s (simulators/blackbody.py).
TAU_S, BAND_K, HOLD_S = 0.05, 0.02, 0.2


@pytest.fixture
def fake() -> Iterator[tuple[RealClock, SimBench, LineServer, LateReplies]]:
    """The TB-7 fake on 127.0.0.1: CR+LF lines, its own dialect, a fifth of replies late."""
    from tests.drivers.invented_blackbody import InventedBlackbody

    clock = RealClock()
    bench = SimBench.from_mapping({"blackbody": {
        "time_constant_s": TAU_S, "slew_k_per_s": 1000.0, "noise_mk": 0.0,
        "stable_band_k": BAND_K, "stable_hold_s": HOLD_S, "reference_drift_k_per_h": 0.0},
        "identity": {"blackbody": "Invented Lab,TB-7,0042,2.1"}}, clock)
    late = LateReplies(BlackbodyProtocol(bench, driver=InventedBlackbody))
    with LineServer(late, name="tb7", terminator=b"\r\n", line_end=b"\r\n") as server:
        yield clock, bench, server, late
