"""Verdicts against spec limits that take the measurement uncertainty into account.

A verdict judges one quantity that a spec key defines (for example "NETD at 30 C source over a
20 C background", or "fitted radial distortion at the field corners"), never a stand-in for it.
It carries the measured value, its standard uncertainty, the limit, the margin and one of three
outcomes.

Decision rule: guarded acceptance with the expanded uncertainty U = k u, k = 2 (about 95 %
coverage for a normal distribution; GUM, JCGM 100:2008, section 6). The value PASSes when it is
inside the limit by more than U, FAILs when it is outside by more than U, and is MARGINAL when the
limit lies inside the band value +/- U (ILAC-G8:09/2019, "Guidelines on decision rules and
statements of conformity", where such results are stated as conditional).

>>> v = judge("netd_mk", "NETD", 41.0, 2.0, "mK", 50.0)
>>> v.status, v.margin
('PASS', 9.0)
>>> judge("netd_mk", "NETD", 49.0, 2.0, "mK", 50.0).status
'MARGINAL'
>>> judge("min_fov_h_deg", "horizontal FOV", 24.0, 0.1, "deg", 25.0, sense="min").status
'FAIL'
>>> overall([judge("a", "a", 1.0, 0.1, "", 2.0), judge("b", "b", 3.0, 0.1, "", 2.0)])
'FAILED'
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any, Literal

__all__ = ["PASS", "FAIL", "MARGINAL", "COVERAGE_K", "SpecKey", "Verdict", "judge", "overall",
           "count_failed", "verdict_from_dict"]

PASS = "PASS"
FAIL = "FAIL"
MARGINAL = "MARGINAL"
COVERAGE_K = 2.0

Sense = Literal["max", "min"]


@dataclass(frozen=True)
class SpecKey:
    """What one spec key of a UUT file means: exactly one quantity, defined once.

    An analysis declares the keys it evaluates; ``conditions`` names the measurement conditions
    the key is defined at (for example ``("source_c", "background_c")`` for NETD), which a UUT
    file may state beside the limit and a recipe must reach.

    >>> k = SpecKey("netd_mk", "NETD", "mK", "max", "temporal noise over SiTF at the source "
    ...             "temperature", conditions=("source_c", "background_c"))
    >>> k.judge(48.0, 0.5, 50.0).status
    'PASS'
    """

    key: str
    quantity: str
    unit: str
    sense: Sense
    definition: str
    conditions: tuple[str, ...] = ()

    def judge(self, value: float, sigma: float, limit: float,
              conditions: Mapping[str, Any] | None = None) -> "Verdict":
        return judge(self.key, self.quantity, value, sigma, self.unit, limit, self.sense,
                     conditions)


@dataclass(frozen=True)
class Verdict:
    """One spec limit judged: what, how much (with its 1-sigma uncertainty), against what.

    ``sense`` "max": the value must not exceed the limit; "min": it must not fall below it.
    ``margin`` is positive inside the limit (limit - value for "max", value - limit for "min"),
    in the quantity's unit. ``conditions`` are the measurement conditions the value holds for
    (source and background temperature, field region, frames ...).
    """

    key: str
    quantity: str
    value: float
    sigma: float
    unit: str
    limit: float
    sense: Sense
    margin: float
    status: str
    conditions: Mapping[str, Any] = field(default_factory=dict)
    coverage_k: float = COVERAGE_K

    @property
    def passed(self) -> bool:
        return self.status == PASS

    def to_dict(self) -> dict[str, Any]:
        return {"key": self.key, "quantity": self.quantity, "value": _finite(self.value),
                "sigma": _finite(self.sigma), "unit": self.unit, "limit": self.limit,
                "sense": self.sense, "margin": _finite(self.margin), "status": self.status,
                "coverage_k": self.coverage_k, "conditions": dict(self.conditions)}


def _finite(x: float) -> float | None:
    return float(x) if math.isfinite(x) else None


def judge(key: str, quantity: str, value: float, sigma: float, unit: str, limit: float,
          sense: Sense = "max", conditions: Mapping[str, Any] | None = None,
          coverage_k: float = COVERAGE_K) -> Verdict:
    """Judge ``value`` +/- ``sigma`` against ``limit`` (see the module's decision rule).

    A value or uncertainty that is not finite can never pass: it comes out FAIL, so a verdict
    is never silently wrong.
    """
    if sense not in ("max", "min"):
        raise ValueError(f"sense must be 'max' or 'min', not {sense!r}")
    value, sigma, limit = float(value), abs(float(sigma)), float(limit)
    margin = (limit - value) if sense == "max" else (value - limit)
    if not (math.isfinite(value) and math.isfinite(sigma)):
        status = FAIL
    elif margin > coverage_k * sigma:
        status = PASS
    elif margin < -coverage_k * sigma:
        status = FAIL
    else:
        status = MARGINAL
    return Verdict(key, quantity, value, sigma, unit, limit, sense, margin, status,
                   dict(conditions or {}), coverage_k)


def verdict_from_dict(d: Mapping[str, Any]) -> Verdict:
    """Read back a verdict written by :meth:`Verdict.to_dict` (a results file, the history)."""
    nan = float("nan")
    value = d.get("value")
    sigma = d.get("sigma")
    margin = d.get("margin")
    return Verdict(str(d["key"]), str(d.get("quantity", d["key"])),
                   nan if value is None else float(value), nan if sigma is None else float(sigma),
                   str(d.get("unit", "")), float(d["limit"]), d.get("sense", "max"),
                   nan if margin is None else float(margin), str(d["status"]),
                   dict(d.get("conditions") or {}), float(d.get("coverage_k", COVERAGE_K)))


def count_failed(verdicts: Iterable[Verdict]) -> int:
    return sum(1 for v in verdicts if v.status == FAIL)


def overall(verdicts: Iterable[Verdict]) -> str:
    """'PASSED' (none failed), 'FAILED' (any failed) or 'NOT JUDGED' (no verdict at all).

    A MARGINAL verdict does not fail the unit; it is listed as marginal beside the outcome.
    """
    items = list(verdicts)
    if not items:
        return "NOT JUDGED"
    return "FAILED" if count_failed(items) else "PASSED"
