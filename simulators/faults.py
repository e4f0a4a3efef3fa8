"""Fault injection plan: reproducible failures for the simulated bench.

A plan is a list of rules, each naming an instrument, a fault kind and a trigger: the n-th command
to that instrument (`at_command`), clock seconds since the bench started (`after_s`), or a
probability per check drawn from a seeded generator (`probability`). Same plan, same seed, same
commands -> same failures. From a dict (the simulated station file's `faults:` section):

    faults:
      seed: 7
      blackbody:
        - {kind: timeout, at_command: 12}
        - {kind: drift, after_s: 600, rate_k_per_s: 0.002}    # add duration_s: N to recover
      stage:
        - {kind: stall, at_command: 4, axis: az}
      grabber:
        - {kind: drop, probability: 0.001}

Anyone (servers, the camera simulator, tests) asks `plan.fire(instrument, kind, count=, t=)`.
"""

from __future__ import annotations

import random
import threading
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

WIRE_KINDS = ("timeout", "garbled", "truncated", "disconnect", "restart")
PHYSICS_KINDS = {"blackbody": ("unsettled", "drift"), "stage": ("stall", "hard_limit"),
                 "grabber": ("drop", "repeat", "short")}


def kinds_for(instrument_kind: str) -> tuple[str, ...]:
    """Fault kinds valid for an instrument kind (blackbody, wheel, stage, grabber)."""
    if instrument_kind == "grabber":
        return PHYSICS_KINDS["grabber"]
    return WIRE_KINDS + PHYSICS_KINDS.get(instrument_kind, ())


@dataclass
class FaultRule:
    """One fault: what, to whom, when, how often."""

    instrument: str
    kind: str
    at_command: int | None = None
    after_s: float | None = None
    probability: float | None = None
    times: int | None = 1              # fires at most this often; None = unlimited
    params: dict[str, Any] = field(default_factory=dict)
    fired: int = 0

    def __post_init__(self) -> None:
        triggers = [x is not None for x in (self.at_command, self.after_s, self.probability)]
        if sum(triggers) != 1:
            raise ValueError(f"fault {self.instrument}/{self.kind}: give exactly one of "
                             "at_command, after_s, probability")
        if self.probability is not None and not 0 <= self.probability <= 1:
            raise ValueError(f"fault {self.instrument}/{self.kind}: probability must be 0..1")


@dataclass(frozen=True)
class FaultEvent:
    """A fault that fired (for the log and for soak-test accounting)."""

    instrument: str
    kind: str
    count: int | None
    t: float | None
    params: Mapping[str, Any]


class FaultPlan:
    """Rules plus a seeded generator; thread-safe (servers run one thread per connection).

    `t0` is the clock time `after_s` counts from; left None, the simulated bench sets it to
    its own start time when the plan is handed to it.
    """

    def __init__(self, rules: list[FaultRule] | None = None, *, seed: int = 0,
                 t0: float | None = None) -> None:
        self.rules: list[FaultRule] = list(rules or [])
        self.seed = seed
        self.t0 = t0
        self._rng = random.Random(seed)
        self._lock = threading.Lock()
        self.fired: list[FaultEvent] = []

    @classmethod
    def from_mapping(cls, d: Mapping[str, Any] | None, *, seed: int = 0, t0: float | None = None,
                     kinds: Mapping[str, str] | None = None) -> FaultPlan:
        """Build from a station-file mapping. `kinds` maps instrument name -> instrument kind
        (defaults: the name is the kind) so rules are checked against what the instrument is."""
        d = dict(d or {})
        seed = int(d.pop("seed", seed))
        rules = []
        for instrument, entries in d.items():
            ikind = (kinds or {}).get(instrument, instrument)
            allowed = kinds_for(ikind)
            if isinstance(entries, Mapping):
                entries = [entries]
            for i, entry in enumerate(entries or []):
                e = dict(entry)
                where = f"faults.{instrument}[{i}]"
                kind = e.pop("kind", None)
                if kind not in allowed:
                    raise ValueError(f"{where}: kind {kind!r} unknown for a {ikind}; "
                                     f"use one of {list(allowed)}")
                trig = {k: e.pop(k) for k in ("at_command", "after_s", "probability", "times")
                        if k in e}
                if "times" not in trig:
                    trig["times"] = None if "probability" in trig else 1
                try:
                    rules.append(FaultRule(instrument, kind, params=e, **trig))
                except (TypeError, ValueError) as exc:
                    raise ValueError(f"{where}: {exc}") from None
        return cls(rules, seed=seed, t0=t0)

    def start(self) -> float:
        """Clock time that `after_s` triggers count from (0 until a bench binds the plan)."""
        return 0.0 if self.t0 is None else self.t0

    def add(self, instrument: str, kind: str, **trigger: Any) -> FaultRule:
        """Add a rule from a test: `plan.add("wheel", "timeout", at_command=3)`."""
        params = trigger.pop("params", {})
        if "times" not in trigger:
            trigger["times"] = None if "probability" in trigger else 1
        rule = FaultRule(instrument, kind, params=dict(params), **trigger)
        with self._lock:
            self.rules.append(rule)
        return rule

    def fire(self, instrument: str, kind: str, *, count: int | None = None,
             t: float | None = None) -> FaultRule | None:
        """The rule that fires now for (instrument, kind), or None. Records the firing."""
        with self._lock:
            for rule in self.rules:
                if rule.instrument != instrument or rule.kind != kind:
                    continue
                if rule.times is not None and rule.fired >= rule.times:
                    continue
                if rule.at_command is not None:
                    hit = count is not None and count >= rule.at_command
                elif rule.after_s is not None:
                    hit = t is not None and t - self.start() >= rule.after_s
                else:
                    hit = self._rng.random() < (rule.probability or 0.0)
                if hit:
                    rule.fired += 1
                    self.fired.append(FaultEvent(instrument, kind, count, t, dict(rule.params)))
                    return rule
        return None

    def should_fire(self, instrument: str, kind: str, *, count: int | None = None,
                    t: float | None = None) -> bool:
        """True when a fault of this kind fires now (the grabber's entry point)."""
        return self.fire(instrument, kind, count=count, t=t) is not None

    def first_wire_fault(self, instrument: str, *, count: int, t: float) -> FaultRule | None:
        """The first wire-level fault (timeout, garbled, ...) that fires for this command."""
        for kind in WIRE_KINDS:
            rule = self.fire(instrument, kind, count=count, t=t)
            if rule is not None:
                return rule
        return None

    def counts(self) -> dict[tuple[str, str], int]:
        """How often each (instrument, kind) fired."""
        out: dict[tuple[str, str], int] = {}
        for ev in self.fired:
            out[(ev.instrument, ev.kind)] = out.get((ev.instrument, ev.kind), 0) + 1
        return out
