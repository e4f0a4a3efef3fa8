"""The typed steps of a plan: one frozen dataclass per kind of step, units in the field names.

Why typed: the plan crosses from the recipe language to the run engine, the estimate and the
analyses. A dataclass per kind states once what each step carries (a blackbody step has a
setpoint, a tolerance in kelvin, a hold and a timeout in seconds ...), so a handler reads
``step.timeout_s`` rather than ``params["timeout"]`` and a type checker sees a misspelt field.
Every step also carries its stable ``id``, where it was written (``source``) and the loop values
in force (``context``, outermost loop first).

>>> from sequences.yamlsource import SourceRef
>>> at = SourceRef("r.yaml", 5, 5)
>>> step = BlackbodyStep("s1.blackbody", at, {}, mode="difference", setpoint=5.0)
>>> step.kind, step.unit, step.timeout_s
('blackbody', 'K', 900.0)
>>> step.describe()
'blackbody mode=difference, setpoint=5.0, tolerance_k=0.02, hold_s=10.0, timeout_s=900.0'
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, fields
from typing import ClassVar, Literal, Union

from sequences.yamlsource import SourceRef

__all__ = ["LoopValue", "OptionValue", "Keep", "BlackbodyMode", "StepBase", "BlackbodyStep",
           "TargetStep", "MoveStep", "CaptureStep", "AnalyzeStep", "NoteStep", "WaitStep",
           "AlignStep", "FovScanStep",
           "PlanStep", "STEP_TYPES"]

LoopValue = Union[str, int, float, bool]
"""A value a sweep or scan gives its loop variable."""

OptionValue = Union[str, int, float, bool]
"""A value of an analysis option, as written under ``options:`` (checked by the analysis)."""

Keep = Literal["average", "stack", "both"]
BlackbodyMode = Literal["absolute", "difference"]

_COMMON = ("id", "source", "context")


@dataclass(frozen=True)
class StepBase:
    """What every plan step has: its stable id, where it is written and its loop values."""

    id: str
    source: SourceRef
    context: Mapping[str, LoopValue]

    kind: ClassVar[str] = ""

    def parameters(self) -> dict[str, object]:
        """The kind's own fields (not id, source, context), in declaration order."""
        return {f.name: getattr(self, f.name) for f in fields(self)
                if f.name not in _COMMON and f.compare}

    def describe(self) -> str:
        """One line for the console and the log: the kind and its parameters."""
        text = ", ".join(f"{k}={_short(v)}" for k, v in self.parameters().items()
                         if v not in ({}, (), None))
        return f"{self.kind} {text}".strip()


def _short(value: object) -> str:
    if isinstance(value, Mapping):
        return "{" + ", ".join(f"{k}: {v}" for k, v in value.items()) + "}"
    if isinstance(value, tuple):
        return "[" + ", ".join(map(str, value)) + "]"
    return str(value)


@dataclass(frozen=True)
class BlackbodyStep(StepBase):
    """Bring the source to ``setpoint`` (C in absolute mode, K above the reference in difference
    mode) and wait until it stays within ``tolerance_k`` for ``hold_s``; give up after
    ``timeout_s``."""

    mode: BlackbodyMode = "difference"
    setpoint: float = 0.0
    tolerance_k: float = 0.02
    hold_s: float = 10.0
    timeout_s: float = 900.0

    kind: ClassVar[str] = "blackbody"

    @property
    def unit(self) -> str:
        """'C' for an absolute setpoint, 'K' for a difference."""
        return "C" if self.mode == "absolute" else "K"


@dataclass(frozen=True)
class TargetStep(StepBase):
    """Turn the wheel to the slot holding ``target``."""

    target: str = ""

    kind: ClassVar[str] = "target"


@dataclass(frozen=True)
class MoveStep(StepBase):
    """Move the stage: ``position`` maps axis name to the target value in the axis's own unit
    (as the station file declares it: degrees for a gimbal, millimetres for a linear axis)."""

    position: Mapping[str, float] = field(default_factory=dict)

    kind: ClassVar[str] = "move"


@dataclass(frozen=True)
class CaptureStep(StepBase):
    """Grab ``frames`` frames and keep their average, their stack or both.

    ``name`` is the instance name (the group plus the loop values, ``spot[az=-20,el=10]``);
    ``group`` is the name as written. ``target`` and ``pose`` are what the plan puts in the beam
    and where it leaves the stage when this capture is taken (None / axes not moved yet: not
    known from the plan); the analyses' needs are checked against them.
    """

    name: str = ""
    group: str = ""
    frames: int = 1
    keep: Keep = "average"
    target: str | None = None
    pose: Mapping[str, float] = field(default_factory=dict)

    kind: ClassVar[str] = "capture"


@dataclass(frozen=True)
class AnalyzeStep(StepBase):
    """Run the analysis ``analysis`` over ``instances`` (every capture instance the names in
    ``captures`` stand for, in the order made). ``options`` are checked by the analysis's
    declaration in the station's registry; ``option_refs`` say where each option is written."""

    analysis: str = ""
    captures: tuple[str, ...] = ()
    instances: tuple[str, ...] = ()
    options: Mapping[str, OptionValue] = field(default_factory=dict)
    option_refs: Mapping[str, SourceRef] = field(default_factory=dict, compare=False,
                                                 repr=False)
    captures_ref: SourceRef | None = field(default=None, compare=False, repr=False)

    kind: ClassVar[str] = "analyze"

    @property
    def captures_source(self) -> SourceRef:
        """Where the step's list of captures is written."""
        return self.captures_ref or self.source

    def option_ref(self, name: str) -> SourceRef:
        """Where option ``name`` is written (the step itself if it is not written)."""
        return self.option_refs.get(name, self.source)


@dataclass(frozen=True)
class NoteStep(StepBase):
    """Write ``text`` into the run's log."""

    text: str = ""

    kind: ClassVar[str] = "note"


@dataclass(frozen=True)
class WaitStep(StepBase):
    """Do nothing for ``duration_s`` seconds (on the station clock)."""

    duration_s: float = 0.0

    kind: ClassVar[str] = "wait"


@dataclass(frozen=True)
class AlignStep(StepBase):
    """Point the UUT at the collimator axis, closed loop on the single pinhole: measure, move,
    repeat until the spot is within ``tolerance_px`` of the reference pixel, at most
    ``max_iterations`` times, averaging ``frames`` frames per look. With ``origin`` the aligned
    pose becomes the origin of every later ``move`` and ``scan`` (station/engine/align.py)."""

    tolerance_px: float = 0.25
    max_iterations: int = 8
    frames: int = 4
    origin: bool = True

    kind: ClassVar[str] = "align"


@dataclass(frozen=True)
class FovScanStep(StepBase):
    """Field of view directly: from the current pose, step the pinhole out along azimuth and
    elevation until its image leaves the active area, each edge bisected to ``tolerance_deg``,
    ``frames`` frames averaged per look (station/engine/align.py)."""

    tolerance_deg: float = 0.02
    frames: int = 2

    kind: ClassVar[str] = "fov_scan"


PlanStep = Union[BlackbodyStep, TargetStep, MoveStep, CaptureStep, AnalyzeStep, NoteStep,
                 WaitStep, AlignStep, FovScanStep]
"""Any concrete step of a plan."""

STEP_TYPES: Mapping[str, type[StepBase]] = {
    t.kind: t for t in (BlackbodyStep, TargetStep, MoveStep, CaptureStep, AnalyzeStep, NoteStep,
                        WaitStep, AlignStep, FovScanStep)
}
