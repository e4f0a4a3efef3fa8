"""Blackbody physics, evaluated lazily from the clock in closed form.

Model: the emitter follows its setpoint S(t) as a first-order lag with time constant tau, with
the rate of change limited to the slew rate r:

    dT/dt = clamp((S - T) / tau, -r, +r)

In difference mode S(t) = reference(t) + diff, and the reference drifts linearly, so S is a ramp
S0 + b t (b = drift). With e = S - T:
    slew region  |e| > r tau:  de/dt = b - r sign(e)              (linear in t)
    linear region |e| <= r tau: e(t) = b tau + (e0 - b tau) exp(-t/tau)
The region boundary is crossed once (|b| < r is required), so each query is evaluated exactly
from the last setpoint change, whatever the step size. Readback noise is a deterministic function
of (seed, time). Physics faults (never settles, drifts away) are added on top.
"""

from __future__ import annotations

import math
import random
from dataclasses import dataclass

from drivers.clock import Clock
from drivers.interfaces import BlackbodyMode


@dataclass
class _Segment:
    """State at the last setpoint change: everything later follows from it in closed form."""

    t0: float
    temp0: float
    mode: BlackbodyMode
    value: float  # C in absolute mode, K in difference mode


class BlackbodyPhysics:
    """A simulated area blackbody with a drifting reference sensor. Not thread-safe by itself:
    the simulated bench serialises access."""

    def __init__(self, clock: Clock, *, start_c: float = 22.0, reference_c: float = 22.0,
                 time_constant_s: float = 60.0, slew_k_per_s: float = 0.1,
                 min_c: float = -10.0, max_c: float = 150.0, noise_mk: float = 2.0,
                 reference_drift_k_per_h: float = 0.1, seed: int = 0,
                 stable_band_k: float = 0.02, stable_hold_s: float = 10.0) -> None:
        if time_constant_s <= 0 or slew_k_per_s <= 0:
            raise ValueError("blackbody time_constant_s and slew_k_per_s must be positive")
        if abs(reference_drift_k_per_h) / 3600.0 >= slew_k_per_s:
            raise ValueError("blackbody reference drift must be slower than the slew rate")
        if not min_c < max_c:
            raise ValueError("blackbody min_c must be below max_c")
        self.clock = clock
        self.tau = float(time_constant_s)
        self.slew = float(slew_k_per_s)
        self.min_c, self.max_c = float(min_c), float(max_c)
        self.noise_k = noise_mk / 1000.0
        self.drift_k_per_s = reference_drift_k_per_h / 3600.0
        self.seed = int(seed)
        self.stable_band_k = stable_band_k
        self.stable_hold_s = stable_hold_s
        self.start_c = float(start_c)
        self.reference0_c = float(reference_c)
        self.t_start = clock.now()
        self._seg = _Segment(self.t_start, float(start_c), "absolute", float(start_c))
        self.unsettled_from: float | None = None     # fault: never settles from this time
        self.runaway: tuple[float, float] | None = None  # fault: (from time, K/s) drift away
        self.runaway_until: float | None = None  # fault: the drift ends (controller recovers)

    # --- setpoints --------------------------------------------------------------------------
    def reference_c(self, t: float | None = None) -> float:
        """True reference (ambient) temperature, C: linear drift from the start."""
        t = self.clock.now() if t is None else t
        return self.reference0_c + self.drift_k_per_s * (t - self.t_start)

    @property
    def mode(self) -> BlackbodyMode:
        return self._seg.mode

    @property
    def setpoint_value(self) -> float:
        return self._seg.value

    def setpoint_c(self, t: float | None = None) -> float:
        """Absolute setpoint in C at time t (moves with the reference in difference mode)."""
        t = self.clock.now() if t is None else t
        if self._seg.mode == "absolute":
            return self._seg.value
        return self.reference_c(t) + self._seg.value

    def check(self, mode: BlackbodyMode, value: float) -> str | None:
        """Why a setpoint is refused (None when it is accepted)."""
        target = value if mode == "absolute" else self.reference_c() + value
        if not (math.isfinite(target) and self.min_c <= target <= self.max_c):
            return (f"setpoint {target:.3f} C outside {self.min_c:g}..{self.max_c:g} C")
        return None

    def set(self, mode: BlackbodyMode, value: float) -> None:
        """Change mode and setpoint now (caller checked limits)."""
        now = self.clock.now()
        self._seg = _Segment(now, self._model_c(now), mode, float(value))

    def restart(self) -> None:
        """Power cycle: controller state lost, back to absolute mode at the start setpoint."""
        self.set("absolute", self.start_c)

    # --- readings ---------------------------------------------------------------------------
    def _model_c(self, t: float) -> float:
        """Emitter temperature without faults or noise (the closed form above)."""
        seg = self._seg
        dt = max(0.0, t - seg.t0)
        b = 0.0 if seg.mode == "absolute" else self.drift_k_per_s
        s0 = self.setpoint_c(seg.t0)
        e = s0 - seg.temp0
        band = self.slew * self.tau
        if abs(e) > band:
            sign = 1.0 if e > 0 else -1.0
            rate = b - self.slew * sign            # de/dt in the slew region
            t_cross = (abs(e) - band) / (self.slew - b * sign)
            if dt <= t_cross:
                return self.setpoint_c(seg.t0 + dt) - (e + rate * dt)
            e = sign * band
            dt -= t_cross
        e_t = b * self.tau + (e - b * self.tau) * math.exp(-dt / self.tau)
        return self.setpoint_c(t) - e_t

    def _fault_offset(self, t: float) -> float:
        offset = 0.0
        if self.runaway is not None and t > self.runaway[0] and (
                self.runaway_until is None or t < self.runaway_until):
            offset += self.runaway[1] * (t - self.runaway[0])
        if self.unsettled_from is not None and t > self.unsettled_from:
            # a controller hunting around its setpoint: 0.15 K, 40 s period
            offset += 0.15 * math.sin(2 * math.pi * (t - self.unsettled_from) / 40.0)
        return offset

    def true_c(self, t: float | None = None) -> float:
        """Emitter temperature (faults included, no readback noise), C."""
        t = self.clock.now() if t is None else t
        return self._model_c(t) + self._fault_offset(t)

    def _noise(self, t: float, channel: int) -> float:
        if self.noise_k <= 0:
            return 0.0
        key = (self.seed * 1_000_003 + channel) * 10_000_019 + int(round(t * 10))
        return random.Random(key).gauss(0.0, self.noise_k)

    def measured_c(self, t: float | None = None) -> float:
        t = self.clock.now() if t is None else t
        return self.true_c(t) + self._noise(t, 1)

    def measured_reference_c(self, t: float | None = None) -> float:
        t = self.clock.now() if t is None else t
        return self.reference_c(t) + self._noise(t, 2)

    def is_stable(self, t: float | None = None) -> bool:
        """Within `stable_band_k` of the setpoint for the last `stable_hold_s` seconds.

        After a step |e| decays monotonically (and fault offsets are monotone or never settle),
        so checking both ends of the hold window is exact.
        """
        t = self.clock.now() if t is None else t
        if self.unsettled_from is not None and t >= self.unsettled_from:
            return False
        start = t - self.stable_hold_s
        if start < self._seg.t0:
            return False
        return all(abs(self.setpoint_c(x) - self.true_c(x)) <= self.stable_band_k
                   for x in (start, t))
