"""The simulated bench served from its own process: instruments, camera and clock on loopback.

Why: on a real bench the instruments keep their state when the station software dies. An
in-process simulated bench dies with the run, so resuming was never exercised as it will be used.
`nightbench simulate` runs a `ServedBench`: the blackbody, wheel and stage line servers of
simulators/servers.py, a camera server and a control server, all on 127.0.0.1, sharing one
simulated clock. A run points at them through a station file; a killed run leaves them as they
were (blackbody temperature, stage pose, wheel slot, camera frame counter).

Simulated time is the server's: the run reads and advances it through the control server
(`ServedClock`), so the instruments' physics and the run's waits agree exactly. For resume the
control server also keeps marks: the whole bench state (physics, frame counter, time) at each
step's start and end, keyed by the run; a resumed run rewinds the bench to the state at which the
interrupted step began, so its frames are those an uninterrupted run would have taken.

Control protocol (one text line each way)::

    CLK:NOW?            -> seconds (repr of a float, exact)
    CLK:SLEEP <s>       -> OK          (advances simulated time; paced if the server is)
    SIM:MARK <key>      -> OK          (keep the bench state under key)
    SIM:REWIND <key>    -> OK | ERR 404,"no mark <key>"
    SIM:STATE?          -> JSON: time, blackbody C, wheel slot, stage pose, camera frames

Camera protocol: a text command line, then (for GRAB) a text header line and a raw payload::

    INFO?               -> <cols>,<rows>,<bit depth>,<identity>
    RATE <hz>           -> OK          (frame period the clock advances by per frame)
    BEGIN <key>         -> OK          (next frames are frame 0, 1, ... of capture <key>)
    GRAB                -> FRAME <counter> <timestamp> <rows> <cols> <nbytes>\\n + nbytes of
                           little-endian uint16, rows x cols, row-major
    STATE?              -> <frames so far>

Noise: frame i of capture `key` is rendered with the noise of index hash(key, i) (see
`noise_index`), so a capture taken again after a restart has the same noise; frames outside a
capture use the frame counter.
"""

from __future__ import annotations

import copy
import hashlib
import json
import math
import signal
import socket
import threading
from collections import OrderedDict
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from drivers.clock import PacedClock, SimClock
from simulators.bench import SimBench
from simulators.camera_render import CameraRenderer, SceneState
from simulators.line_server import LineServer, Response
from simulators.servers import start_bench_servers

MAX_MARKS = 20_000
"""Marks kept (two per step); the oldest go first."""


def noise_index(key: str, index: int) -> int:
    """A 64-bit noise index from (capture key, frame index in the capture): SHA-256, so it
    does not depend on Python's hash seed or on how many frames came before."""
    digest = hashlib.sha256(f"{key}\0{int(index)}".encode("utf-8")).digest()
    return int.from_bytes(digest[:8], "little")


@dataclass
class CameraState:
    """The served camera's own state: frame counter, frame period, capture in progress."""

    counter: int = 0
    period_s: float = 1.0 / 30.0
    key: str | None = None
    index: int = 0


class ServedBench:
    """Physics, clock, camera and the marks, behind the simulated bench's one lock."""

    def __init__(self, setup: Mapping[str, Any], *, seed: int = 1,
                 speed: float | None = None) -> None:
        self.clock = PacedClock(speed=speed) if speed else SimClock()
        self.sim = SimBench.from_mapping(dict(setup.get("bench") or {}), self.clock, seed=seed)
        self.renderer = CameraRenderer(setup["truth"], seed=seed)
        self.slots: Mapping[int, Any] = dict(setup.get("slots") or {})
        self.collimator_focal_mm = float(setup.get("collimator_focal_mm", 1000.0))
        self.camera = CameraState()
        self.marks: OrderedDict[str, dict[str, Any]] = OrderedDict()

    # -- scene and frames ---------------------------------------------------------------------
    def scene(self) -> SceneState:
        slot = self.sim.slot_in_beam()
        target = self.slots.get(slot)
        angles = self.sim.stage_angles()
        return SceneState(source_c=self.sim.source_c(), plate_c=self.sim.reference_c(),
                          target=target, az_deg=angles.get("az", 0.0),
                          el_deg=angles.get("el", 0.0),
                          collimator_focal_mm=self.collimator_focal_mm)

    def grab(self) -> tuple[int, float, np.ndarray]:
        """One frame now: (counter, timestamp, uint16 data); the clock moves one frame on."""
        with self.sim.lock:
            cam = self.camera
            cam.counter += 1
            if cam.key is not None:
                index = noise_index(cam.key, cam.index)
                cam.index += 1
            else:
                index = cam.counter
            scene = self.scene()
            stamp = self.clock.now()
            counter = cam.counter
        data = self.renderer.render(scene, index)
        self.clock.sleep(cam.period_s)
        return counter, stamp, np.ascontiguousarray(data, dtype="<u2")

    # -- marks ---------------------------------------------------------------------------------
    def _parts(self) -> dict[str, Any]:
        return {"blackbody": self.sim.blackbody, "wheel": self.sim.wheel,
                "stage": self.sim.stage, "camera": self.camera}

    def mark(self, key: str) -> None:
        with self.sim.lock:
            memo = {id(self.clock): self.clock}
            state = {name: copy.deepcopy(obj.__dict__, memo)
                     for name, obj in self._parts().items()}
            state["now"] = self.clock.now()
            self.marks[key] = state
            self.marks.move_to_end(key)
            while len(self.marks) > MAX_MARKS:
                self.marks.popitem(last=False)

    def rewind(self, key: str) -> bool:
        """Put the whole bench back as it was at mark `key` (time included)."""
        with self.sim.lock:
            state = self.marks.get(key)
            if state is None:
                return False
            memo = {id(self.clock): self.clock}
            for name, obj in self._parts().items():
                obj.__dict__.update(copy.deepcopy(state[name], memo))
            with self.clock._lock:
                self.clock._now = float(state["now"])
            return True

    def state(self) -> dict[str, Any]:
        with self.sim.lock:
            return {"t": self.clock.now(), "blackbody_c": self.sim.source_c(),
                    "wheel_slot": self.sim.slot_in_beam(), "stage": self.sim.stage_angles(),
                    "camera_frames": self.camera.counter}


# -- the control server ----------------------------------------------------------------------------
def control_handler(bench: ServedBench) -> Callable[[str], str]:
    def handle(line: str) -> str:
        head, _, arg = line.partition(" ")
        arg = arg.strip()
        if head == "CLK:NOW?":
            return repr(bench.clock.now())
        if head == "CLK:SLEEP":
            seconds = float(arg)
            if not math.isfinite(seconds):
                return 'ERR 101,"finite seconds expected"'
            bench.clock.sleep(seconds)
            return "OK"
        if head == "SIM:MARK" and arg:
            bench.mark(arg)
            return "OK"
        if head == "SIM:REWIND" and arg:
            return "OK" if bench.rewind(arg) else f'ERR 404,"no mark {arg}"'
        if head == "SIM:STATE?":
            return json.dumps(bench.state(), sort_keys=True)
        return f'ERR 100,"unknown command {head}"'

    return handle


# -- the camera server -----------------------------------------------------------------------------
def camera_answer(bench: ServedBench) -> Callable[[str], Response]:
    """The served camera's answer to one command line: text lines, and for GRAB a header line
    followed by the frame's raw bytes (the LineServer sends `raw` as it is)."""

    def answer(line: str) -> Response:
        head, _, arg = line.partition(" ")
        return Response(raw=_camera_reply(bench, head, arg.strip()))

    return answer


def _camera_reply(bench: ServedBench, head: str, arg: str) -> bytes:
    cam = bench.camera
    if head == "INFO?":
        rows, cols = bench.renderer.shape
        ident = f"nightbench served simulated camera, {bench.renderer.truth.model}"
        return f"{cols},{rows},{int(bench.renderer.truth.bit_depth)},{ident}\n".encode()
    if head == "RATE":
        rate = float(arg)
        if not (math.isfinite(rate) and rate > 0):
            return b'ERR 101,"rate must be above 0"\n'
        with bench.sim.lock:
            cam.period_s = 1.0 / rate
        return b"OK\n"
    if head == "BEGIN" and arg:
        with bench.sim.lock:
            cam.key, cam.index = arg, 0
        return b"OK\n"
    if head == "GRAB":
        counter, stamp, data = bench.grab()
        body = data.tobytes()
        header = f"FRAME {counter} {stamp!r} {data.shape[0]} {data.shape[1]} {len(body)}\n"
        return header.encode("ascii") + body
    if head == "STATE?":
        return f"{cam.counter}\n".encode()
    return f'ERR 100,"unknown command {head}"\n'.encode()


# -- running it --------------------------------------------------------------------------------
def start_served_bench(setup: Mapping[str, Any], *, seed: int = 1, speed: float | None = None
                       ) -> tuple[ServedBench, dict[str, str], Callable[[], None]]:
    """Start every server; returns (bench, {role: resource string}, close)."""
    bench = ServedBench(setup, seed=seed, speed=speed)
    servers = start_bench_servers(bench.sim)
    camera = LineServer(camera_answer(bench), name="camera")
    control = LineServer(control_handler(bench), name="control")
    addresses = {"blackbody": servers.resource("blackbody", "visa"),
                 "wheel": servers.resource("wheel", "serial"),
                 "stage": servers.resource("stage", "visa"),
                 "camera": f"TCPIP::127.0.0.1::{camera.port}::SOCKET",
                 "control": f"127.0.0.1:{control.port}"}

    def close() -> None:
        control.close()
        camera.close()
        servers.close()

    return bench, addresses, close


def serve_forever(setup: Mapping[str, Any], *, seed: int = 1, speed: float | None = None,
                  ready: Callable[[dict[str, str]], None] | None = None) -> None:
    """Serve until SIGINT or SIGTERM (the servers' threads do the work)."""
    stop = threading.Event()
    bench, addresses, close = start_served_bench(setup, seed=seed, speed=speed)
    for sig in (signal.SIGINT, signal.SIGTERM):
        signal.signal(sig, lambda *_: stop.set())
    try:
        if ready is not None:
            ready(addresses)
        while not stop.wait(0.5):
            pass
    finally:
        close()


# -- the run's side: the clock -----------------------------------------------------------------------
class ServedClock:
    """A `Clock` whose time is the served bench's (see the control protocol above).

    Thread-safe: one connection, one request at a time. `mark` and `rewind` are what resume uses
    to restart an interrupted step in the state it began in.
    """

    simulated = True

    def __init__(self, address: str, timeout_s: float = 120.0) -> None:
        host, _, port = address.rpartition(":")
        self.address = address
        self._sock = socket.create_connection((host or "127.0.0.1", int(port)),
                                              timeout=timeout_s)
        self._sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        self._reader = self._sock.makefile("rb")
        self._lock = threading.Lock()

    def _ask(self, line: str) -> str:
        with self._lock:
            self._sock.sendall(line.encode("ascii") + b"\n")
            reply = self._reader.readline()
        if not reply:
            raise ConnectionError(f"served bench at {self.address} closed the connection; is "
                                  "`nightbench simulate` still running?")
        return reply.decode("ascii", "replace").strip()

    def now(self) -> float:
        return float(self._ask("CLK:NOW?"))

    def sleep(self, seconds: float) -> None:
        """Advance the served time; long waits go in 1 s steps, so a paced server answers each
        well within the socket timeout."""
        left = float(seconds)
        while left > 0:
            step = min(left, 1.0)
            self._ask(f"CLK:SLEEP {step!r}")
            left -= step

    def mark(self, key: str) -> None:
        self._ask(f"SIM:MARK {key}")

    def rewind(self, key: str) -> bool:
        return self._ask(f"SIM:REWIND {key}") == "OK"

    def state(self) -> dict[str, Any]:
        return json.loads(self._ask("SIM:STATE?"))

    def close(self) -> None:
        try:
            self._reader.close()
            self._sock.close()
        except OSError:
            pass


__all__ = ["camera_answer", "ServedBench", "ServedClock", "noise_index", "serve_forever",
           "start_served_bench"]
