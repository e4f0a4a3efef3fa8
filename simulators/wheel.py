"""Target wheel physics from the clock: travel time proportional to slots moved.

The wheel turns the shorter way round: moving from slot a to slot b of n takes
`min(|a - b|, n - |a - b|) * seconds_per_slot`. While travelling no slot is in the beam (0).
Homing finds the index and ends at slot 1 (same travel rule, plus one slot's time to find it).
"""

from __future__ import annotations

from drivers.clock import Clock


def slots_between(a: int, b: int, n: int) -> int:
    """Slots travelled the short way round from a to b on a wheel of n slots."""
    d = abs(a - b) % n
    return min(d, n - d)


class WheelPhysics:
    """A simulated target wheel (slots 1..n)."""

    def __init__(self, clock: Clock, slots: int = 6, seconds_per_slot: float = 1.5,
                 start_slot: int = 1) -> None:
        if slots < 1 or seconds_per_slot < 0 or not 1 <= start_slot <= slots:
            raise ValueError("wheel needs slots >= 1, seconds_per_slot >= 0, 1 <= start_slot <= slots")
        self.clock = clock
        self.slots = int(slots)
        self.seconds_per_slot = float(seconds_per_slot)
        self._from = start_slot
        self._to = start_slot
        self._arrive = clock.now()

    def travel_time(self, a: int, b: int) -> float:
        return slots_between(a, b, self.slots) * self.seconds_per_slot

    def is_moving(self) -> bool:
        return self.clock.now() < self._arrive

    def position(self) -> int:
        """Slot in the beam, 0 while travelling."""
        return 0 if self.is_moving() else self._to

    def target(self) -> int:
        return self._to

    def check(self, slot: int) -> str | None:
        if not 1 <= slot <= self.slots:
            return f"slot {slot} outside 1..{self.slots}"
        if self.is_moving():
            return "wheel is moving"
        return None

    def move(self, slot: int) -> float:
        """Start travelling to `slot`; returns the travel time."""
        now = self.clock.now()
        duration = self.travel_time(self._to, slot)
        self._from, self._to, self._arrive = self._to, slot, now + duration
        return duration

    def home(self) -> float:
        """Find the index (one slot's time) then go to slot 1; returns the duration."""
        duration = self.travel_time(self._to, 1) + self.seconds_per_slot
        self._from, self._to, self._arrive = self._to, 1, self.clock.now() + duration
        return duration

    def restart(self) -> None:
        """Power cycle: the wheel homes itself on power-up."""
        self._arrive = self.clock.now()
        self.home()
