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
