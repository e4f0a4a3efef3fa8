"""The statistics the history's questions need, pure functions over plain numbers.

Control chart for individual values (Shewhart individuals chart): centre line at the mean, the
process sigma estimated from the average moving range of successive values, sigma = MR-bar / d2
with d2 = 1.128 for ranges of two (NIST/SEMATECH e-Handbook of Statistical Methods, section
6.3.2.2 "Individuals control charts"; Montgomery, Introduction to Statistical Quality Control).
Points outside mean +/- 3 sigma are flagged. The moving range keeps one wild unit from inflating
its own limits the way the plain standard deviation would.

Comparison of two results: difference, combined standard uncertainty u_c = sqrt(u_a^2 + u_b^2)
(GUM, JCGM 100:2008, 5.1.2, uncorrelated inputs) and the normalised error
E_n = |b - a| / (k u_c), k = 2 (ISO 13528:2015, 9.7; ISO/IEC 17043): E_n > 1 is a significant
change.

>>> c = individuals_chart([10.0, 10.2, 9.9, 10.1, 10.0])
>>> round(c.mean, 3), round(c.sigma, 4)
(10.04, 0.1773)
>>> compare_values(1.0, 0.1, 1.5, 0.1).significant
True
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

D2_N2 = 1.128
SIGMA_LIMIT = 3.0
COVERAGE_K = 2.0


@dataclass(frozen=True)
class ControlChart:
    mean: float
    sigma: float
    lower: float
    upper: float
    outliers: tuple[int, ...]


def individuals_chart(values: Sequence[float]) -> ControlChart:
    """Centre line, moving-range sigma, 3-sigma limits and the indices outside them."""
    xs = [float(v) for v in values]
    if not xs:
        raise ValueError("no values to chart")
    mean = sum(xs) / len(xs)
    ranges = [abs(b - a) for a, b in zip(xs, xs[1:])]
    sigma = (sum(ranges) / len(ranges)) / D2_N2 if ranges else 0.0
    lower, upper = mean - SIGMA_LIMIT * sigma, mean + SIGMA_LIMIT * sigma
    outliers = tuple(i for i, x in enumerate(xs) if sigma > 0 and not lower <= x <= upper)
    return ControlChart(mean, sigma, lower, upper, outliers)


@dataclass(frozen=True)
class Change:
    difference: float
    u_combined: float | None
    en: float | None
    significant: bool | None


def compare_values(a: float, u_a: float | None, b: float, u_b: float | None,
                   k: float = COVERAGE_K) -> Change:
    """b - a with its combined uncertainty; significance unknown when neither has one."""
    diff = float(b) - float(a)
    us = [u for u in (u_a, u_b) if u is not None and math.isfinite(u)]
    if not us:
        return Change(diff, None, None, None)
    u_c = math.sqrt(sum(u * u for u in us))
    if u_c == 0:
        return Change(diff, 0.0, None if diff == 0 else math.inf, diff != 0)
    en = abs(diff) / (k * u_c)
    return Change(diff, u_c, en, en > 1.0)
