"""Open a station's instruments (starting the built-in simulators when it is simulated).

`open_bench` is the one place where station file entries become live driver objects. With a
simulated station it starts the wire-protocol servers on loopback and points the real drivers at
them, so a dry run exercises the same driver code and sockets as the real bench.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from drivers.clock import Clock
from drivers.errors import InstrumentError
from drivers.interfaces import Blackbody, FrameGrabber, Instrument, MotionStage, TargetWheel
from station.inputs.config import StationConfig

if TYPE_CHECKING:
    from simulators.bench import SimBench
    from simulators.camera_truth import CameraTruth
    from simulators.faults import FaultPlan

EventSink = Callable[[dict[str, Any]], None]


@dataclass
class Bench:
    """The live instruments of one station, plus the simulated bench behind them if any."""

    blackbody: Blackbody
    wheel: TargetWheel
    stage: MotionStage
    camera: FrameGrabber
    clock: Clock
    simulation: SimBench | None = None  # the simulated bench behind the drivers, if any
    identities: dict[str, str] = field(default_factory=dict)

    def instruments(self) -> dict[str, Instrument]:
        return {"blackbody": self.blackbody, "wheel": self.wheel, "stage": self.stage,
                "camera": self.camera}

    def readings(self) -> dict[str, Any]:
        """Live readings for the console and frame metadata; a failing instrument says so."""
        out: dict[str, Any] = {}
        for role, inst in self.instruments().items():
            try:
                out[role] = inst.snapshot()
            except InstrumentError as exc:
                out[role] = {"error": str(exc)}
        return out


def _sim_resource(resource: str, port: int) -> str:
    if resource == "sim+serial":
        return f"socket://127.0.0.1:{port}"
    return f"TCPIP::127.0.0.1::{port}::SOCKET"


def _simulated_scene(station: StationConfig, sim: SimBench, clock: Clock,
                     uut_frame_rate: float, seed: int) -> dict[str, object]:
    """What the simulated camera driver finds on its 'cable': renderer, scene, clock, rate."""
    from simulators.camera_render import CameraRenderer, SceneState

    renderer = CameraRenderer(camera_truth(station), seed=seed)

    def scene() -> SceneState:
        slot = sim.slot_in_beam()
        target = station.slots[slot].target if slot in station.slots else None
        angles = sim.stage_angles()
        return SceneState(source_c=sim.source_c(), plate_c=sim.reference_c(), target=target,
                          az_deg=angles.get("az", 0.0), el_deg=angles.get("el", 0.0),
                          collimator_focal_mm=station.collimator_focal_mm)

    return {"renderer": renderer, "scene": scene, "clock": clock,
            "frame_rate_hz": uut_frame_rate, "faults": sim.faults}


def camera_truth(station: StationConfig) -> CameraTruth:
    """The simulated camera's truth, from the file named in the station's simulation section."""
    import yaml

    from simulators.camera_truth import truth_from_mapping

    sim = station.simulation or {}
    name = sim.get("camera_truth")
    if name is None:
        raise ValueError(f"{station.path}: the simulation section needs 'camera_truth: FILE' "
                         "(the simulated camera's actual distortion, noise and defects)")
    path = station_relative(station, str(name))
    try:
        mapping = yaml.safe_load(path.read_text(encoding="utf-8"))
    except (OSError, yaml.YAMLError) as exc:
        raise ValueError(f"{path}: cannot read the simulated camera's truth ({exc})") from None
    return truth_from_mapping(mapping)


def _declared(station: StationConfig) -> dict[str, Any]:
    """Simulated instruments whose driver is declared (drivers/declare.py): the simulator
    speaks that declaration's dialect, so a station-file dialect can be dry-run."""
    from drivers.declare import DeclaredDriver
    from drivers.registry import find_driver

    out: dict[str, Any] = {}
    for role, entry in station.instruments.items():
        if role != "camera" and entry.resource.startswith("sim"):
            cls = find_driver(entry.driver)
            if isinstance(cls, type) and issubclass(cls, DeclaredDriver):
                out[role] = cls(None, name=role, settings=entry.settings)
    return out


@contextmanager
def open_bench(station: StationConfig, clock: Clock, *, events: EventSink | None = None,
               frame_rate_hz: float = 30.0, seed: int = 1,
               fault_plan: FaultPlan | None = None) -> Iterator[Bench]:
    """Connect every instrument; close them (and stop simulators) on the way out."""
    from drivers.recovery import RetryPolicy
    from drivers.registry import find_driver
    from drivers.transport import LocalTransport, ResourceInfo, open_transport

    with ExitStack() as stack:
        sim = None
        servers = None
        ports: dict[str, int] = {}
        from station.engine.served import is_served

        if station.simulated and not is_served(station):
            from simulators.bench import SimBench
            from simulators.servers import start_bench_servers

            sim = SimBench.from_mapping(dict(station.simulation.get("bench", {})), clock,
                                        seed=seed)
            if fault_plan is not None:
                sim.faults = fault_plan
            servers = stack.enter_context(start_bench_servers(sim, _declared(station)))
            ports = dict(servers.ports)
        built: dict[str, Instrument] = {}
        for role, entry in station.instruments.items():
            if role == "camera":
                continue
            resource = entry.resource
            link = dict(instrument=role, clock=clock, timeout_s=entry.timeout_s,
                        policy=RetryPolicy.from_mapping(entry.recovery), events=events)
            if resource == "sim+local" and servers is not None:
                from simulators.servers import answerer

                transport = LocalTransport(ResourceInfo("sim+local", "local", "local", role),
                                           answer=answerer(servers.protocols[role], role),
                                           read_termination="\n", write_termination="\n",
                                           **link)
            else:
                if resource.startswith("sim"):
                    resource = _sim_resource(resource, ports[role])
                transport = open_transport(resource, **link)
            stack.callback(transport.close)
            cls = find_driver(entry.driver)
            built[role] = cls(transport, name=role, settings=entry.settings)
        cam_entry = station.instruments["camera"]
        settings = {**cam_entry.settings, "resource": cam_entry.resource,
                    "base_dir": str(station.base_dir)}
        if cam_entry.resource.startswith("sim") and sim is not None:
            settings.update(_simulated_scene(station, sim, clock, frame_rate_hz, seed))
        camera = find_driver(cam_entry.driver)(None, name="camera", settings=settings)
        stack.callback(camera.close)
        bench = Bench(blackbody=built["blackbody"], wheel=built["wheel"],  # type: ignore[arg-type]
                      stage=built["stage"], camera=camera, clock=clock,  # type: ignore[arg-type]
                      simulation=sim)
        yield bench


def station_relative(station: StationConfig, name: str) -> Path:
    """A file named in the station file, relative to the station file's folder."""
    p = Path(name)
    return p if p.is_absolute() else station.base_dir / p
