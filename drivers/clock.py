"""One clock for every wait in the project.

Hardware runs on `RealClock`; dry runs use `SimClock`, whose `sleep` returns at once and moves
simulated time forward, so an eight-hour recipe proves itself in seconds. Simulator physics reads
the same clock, so the bench has advanced by exactly the time the sequencer waited.
"""

from __future__ import annotations

import threading
import time
from typing import Protocol, runtime_checkable


@runtime_checkable
class Clock(Protocol):
    """Seconds since an arbitrary epoch, plus a wait that may or may not take real time."""

    def now(self) -> float: ...

    def sleep(self, seconds: float) -> None: ...

    @property
    def simulated(self) -> bool: ...


class RealClock:
    """Wall-clock time (monotonic for intervals, epoch offset kept for timestamps)."""

    simulated = False

    def __init__(self) -> None:
        self._offset = time.time() - time.monotonic()

    def now(self) -> float:
        return time.monotonic() + self._offset

    def sleep(self, seconds: float) -> None:
        if seconds > 0:
            time.sleep(seconds)


class SimClock:
    """Simulated time: `sleep` advances `now` instantly. Thread-safe.

    `start` defaults to a fixed epoch (2026-01-01 00:00 UTC) so simulated runs are reproducible.
    """

    simulated = True

    def __init__(self, start: float = 1_767_225_600.0) -> None:
        self._now = float(start)
        self._lock = threading.Lock()

    def now(self) -> float:
        with self._lock:
            return self._now

    def sleep(self, seconds: float) -> None:
        if seconds < 0:
            return
        with self._lock:
            self._now += float(seconds)

    advance = sleep


class PacedClock(SimClock):
    """Simulated time that also waits a fraction of real time: for demonstrations.

    `speed` is simulated seconds per real second (1.0 = real time).
    """

    def __init__(self, speed: float = 1.0, start: float = 1_767_225_600.0) -> None:
        super().__init__(start)
        if speed <= 0:
            raise ValueError("speed must be positive")
        self.speed = speed

    def sleep(self, seconds: float) -> None:
        if seconds > 0:
            time.sleep(seconds / self.speed)
        super().sleep(seconds)


def choose_clock(all_simulated: bool, realtime_speed: float | None) -> Clock:
    """The clock a station runs on: it follows the instruments.

    Any real instrument means real time (a real blackbody does not settle faster because the
    sequencer skips its waits). Simulated time only when every instrument is simulated; there,
    `realtime_speed` (the `--realtime` demonstration) paces it against the wall clock.

    >>> choose_clock(False, None).simulated, choose_clock(True, None).simulated
    (False, True)
    """
    if not all_simulated:
        return RealClock()
    if realtime_speed is not None:
        return PacedClock(speed=realtime_speed)
    return SimClock()


def mixed_station_note(simulated: list[str], real: list[str]) -> str | None:
    """What `check` and `run` print for a station mixing real and simulated instruments
    (None when it does not mix): it runs on real time, and why.

    >>> mixed_station_note(["wheel", "stage"], ["blackbody"])[:60]
    'this station mixes real (blackbody) and simulated (wheel, st'
    """
    if not simulated or not real:
        return None
    return (f"this station mixes real ({', '.join(real)}) and simulated "
            f"({', '.join(simulated)}) instruments: it runs on real time, so the simulated "
            "ones move at their real speed and waits take wall-clock time")
