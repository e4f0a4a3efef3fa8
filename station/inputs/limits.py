"""The station's limits, asked in one place: "is this setpoint allowed, and if not why".

Recipe validation (through StationFacts), preflight and the step handlers all ask the same
object, built from the station file, so a limit is written down once and every refusal says the
same thing. The drivers check again before they send (their own last line of defence).

>>> from station.inputs.limits import StationLimits
>>> limits = StationLimits.from_ranges(absolute_c=(5, 100), difference_k=(-10, 40),
...                                    axes={"az": (-45, 45, "deg")})
>>> limits.setpoint_problem("difference", 60).message
"blackbody difference 60 K is outside the station's limits -10 .. 40 K"
>>> limits.setpoint_problem("absolute", 35) is None
True
>>> limits.position_problem("az", -50, 10).message
'az = -50 is outside the soft limits -45 .. 45'
"""

from __future__ import annotations

import difflib
from collections.abc import Mapping
from dataclasses import dataclass

from drivers.interfaces import AxisLimits
from sequences.facts import Refusal

__all__ = ["StationLimits", "ANGULAR_UNITS"]

ANGULAR_UNITS = frozenset({"deg", "degree", "degrees", "rad", "mrad", "arcmin", "arcsec"})


@dataclass(frozen=True)
class StationLimits:
    """Blackbody ranges (inclusive) and stage soft limits, from the station file."""

    absolute_c: tuple[float, float]
    difference_k: tuple[float, float]
    axes: Mapping[str, AxisLimits]

    @classmethod
    def from_ranges(cls, *, absolute_c: tuple[float, float], difference_k: tuple[float, float],
                    axes: Mapping[str, tuple[float, float, str]]) -> StationLimits:
        """Limits from plain numbers (tests, notebooks): axes map name -> (min, max, unit)."""
        return cls((float(absolute_c[0]), float(absolute_c[1])),
                   (float(difference_k[0]), float(difference_k[1])),
                   {a: AxisLimits(float(lo), float(hi), 0.0, unit)
                    for a, (lo, hi, unit) in axes.items()})

    def setpoint_problem(self, mode: str, value: float) -> Refusal | None:
        """None if the blackbody may go to ``value`` (C absolute, K difference), else why not."""
        if mode not in ("absolute", "difference"):
            return Refusal(f"blackbody mode '{mode}' is not known", "use absolute or difference")
        low, high = self.absolute_c if mode == "absolute" else self.difference_k
        unit = " C" if mode == "absolute" else " K"
        if low <= value <= high:
            return None
        return Refusal(f"blackbody {mode} {value:g}{unit} is outside the station's limits "
                       f"{low:g} .. {high:g}{unit}", f"choose a value from {low:g} to {high:g}")

    def position_problem(self, axis: str, low: float, high: float | None = None
                         ) -> Refusal | None:
        """None if ``axis`` may go to ``low`` (and every value up to ``high``), else why not."""
        limits = self.axes.get(axis)
        if limits is None:
            close = difflib.get_close_matches(axis, sorted(self.axes), n=1, cutoff=0.6)
            hint = (f"did you mean '{close[0]}'?" if close
                    else f"known axes: {', '.join(sorted(self.axes)) or 'none'}")
            return Refusal(f"the stage has no axis '{axis}'", hint)
        high = low if high is None else high
        for value in (low, high):
            if not limits.contains(value):
                return Refusal(f"{axis} = {value:g} is outside the soft limits "
                               f"{limits.minimum:g} .. {limits.maximum:g}",
                               f"keep {axis} between {limits.minimum:g} and {limits.maximum:g}")
        return None

    def axis_units(self) -> dict[str, str]:
        return {a: lim.unit for a, lim in self.axes.items()}
