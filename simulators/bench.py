"""The simulated bench: one shared state object for the clock, the physics and the faults.

The wire-protocol servers change it; the camera simulator reads it (`source_c`, `reference_c`,
`slot_in_beam`, `stage_angles`). One lock serialises every access, so server threads and the
camera see a consistent bench.
"""

from __future__ import annotations

import copy
import threading
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from drivers.clock import Clock
from simulators.blackbody import BlackbodyPhysics
from simulators.faults import FaultPlan
from simulators.stage import StagePhysics
from simulators.wheel import WheelPhysics

DEFAULTS: dict[str, Any] = {
    "blackbody": {"start_c": 22.0, "reference_c": 22.0, "time_constant_s": 60.0,
                  "slew_k_per_s": 0.1, "min_c": -10.0, "max_c": 150.0, "noise_mk": 2.0,
                  "reference_drift_k_per_h": 0.1},
    "wheel": {"slots": 6, "seconds_per_slot": 1.5, "start_slot": 1},
    "stage": {"axes": {
        "az": {"min": -45.0, "max": 45.0, "hard_min": -50.0, "hard_max": 50.0,
               "velocity": 10.0, "acceleration": 20.0, "start": 0.0},
        "el": {"min": -45.0, "max": 45.0, "hard_min": -50.0, "hard_max": 50.0,
               "velocity": 10.0, "acceleration": 20.0, "start": 0.0},
    }},
    "identity": {
        "blackbody": "nightbench simulator,simulated blackbody,NB-SIM-BB,1.0",
        "wheel": "nightbench simulator,simulated target wheel,NB-SIM-TW,1.0",
        "stage": "nightbench simulator,simulated gimbal,NB-SIM-GS,1.0",
    },
}


@dataclass
class SimBench:
    """Clock + blackbody + wheel + stage + fault plan, behind one lock."""

    clock: Clock
    blackbody: BlackbodyPhysics
    wheel: WheelPhysics
    stage: StagePhysics
    faults: FaultPlan
    identity: Mapping[str, str]
    lock: threading.RLock

    @classmethod
    def from_mapping(cls, d: Mapping[str, Any] | None, clock: Clock, seed: int = 0, *,
                     faults: FaultPlan | Mapping[str, Any] | None = None) -> SimBench:
        """Build from the simulated station file's `simulation:` section (all keys optional).

        Keys: blackbody (BlackbodyPhysics keywords), wheel (slots, seconds_per_slot,
        start_slot), stage ({name: {min, max, hard_min, hard_max, velocity, acceleration,
        start}}, optionally under an `axes` key; replaces the default axes), identity
        ({blackbody|wheel|stage: *IDN? reply}), faults (FaultPlan mapping). A `faults` argument
        (a FaultPlan or a mapping) takes the place of the mapping's own.
        """
        d = dict(d or {})
        unknown = set(d) - {"blackbody", "wheel", "stage", "identity", "faults"}
        if unknown:
            raise ValueError(f"simulation: unknown key(s) {sorted(unknown)}; accepted are "
                             "blackbody, wheel, stage, identity, faults")
        bb = {**DEFAULTS["blackbody"], **(d.get("blackbody") or {})}
        wh = {**DEFAULTS["wheel"], **(d.get("wheel") or {})}
        axes = copy.deepcopy(DEFAULTS["stage"]["axes"])
        if d.get("stage"):
            given = dict(d["stage"])
            axes = dict(given["axes"]) if "axes" in given else given
        ident = {**DEFAULTS["identity"], **(d.get("identity") or {})}
        try:
            blackbody = BlackbodyPhysics(clock, seed=seed, **bb)
            wheel = WheelPhysics(clock, **wh)
            stage = StagePhysics(clock, axes)
        except TypeError as exc:
            raise ValueError(f"simulation: {exc}") from None
        if isinstance(faults, FaultPlan):
            plan = faults
            if plan.t0 is None:
                plan.t0 = clock.now()
        else:
            plan = FaultPlan.from_mapping(faults if faults is not None else d.get("faults"),
                                          seed=seed, t0=clock.now())
        return cls(clock, blackbody, wheel, stage, plan, ident, threading.RLock())

    # --- what the camera simulator reads ---------------------------------------------------
    def source_c(self) -> float:
        """True emitter temperature now, C."""
        with self.lock:
            return self.blackbody.true_c()

    def reference_c(self) -> float:
        """True reference (ambient) temperature now, C."""
        with self.lock:
            return self.blackbody.reference_c()

    def slot_in_beam(self) -> int:
        """Wheel slot in the beam, 0 while the wheel travels."""
        with self.lock:
            return self.wheel.position()

    def stage_angles(self) -> dict[str, float]:
        """Actual position of every stage axis now."""
        with self.lock:
            return {a: self.stage.position(a) for a in self.stage.axes()}
