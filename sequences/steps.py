"""The step vocabulary of the recipe language: which steps exist, their options and their checks.

Each kind of step is one :class:`StepSpec` in :data:`STEP_SPECS`. Parsing (:func:`parse_steps`)
checks the shape of a step list once, as written: known step names, known options, required
options present, loop bodies present. Values are checked later, per expanded step, by
:func:`coerce_options` and :func:`station_problems`, because a value may be a reference such as
``${diff}`` whose type and size are only known inside its loop.
"""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass, field
from collections.abc import Mapping
from typing import Any, Callable

from sequences.facts import StationFacts
from sequences.plansteps import (AlignStep, AnalyzeStep, BlackbodyStep, FovScanStep, MoveStep,
                                 NoteStep, PlanStep, StepBase, TargetStep, WaitStep)
from sequences.yamlsource import MarkedDict, MarkedList, Problem, SourceRef, ref_in

__all__ = [
    "REQUIRED",
    "Option",
    "StepSpec",
    "StepNode",
    "STEP_SPECS",
    "LOOP_KINDS",
    "NAME_PATTERN",
    "parse_steps",
    "coerce_value",
    "coerce_options",
    "station_problems",
    "suggest",
    "axis_problems",
    "ref_in_key",
]

MAX_FRAMES_PER_CAPTURE = 1_000_000
"""About 9 hours at 30 Hz, 650 GB of 640x512 stack: more is a typo."""

NAME_PATTERN = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
CAPTURE_NAME_PATTERN = re.compile(r"^[A-Za-z_][A-Za-z0-9_.\-]*$")


class _Required:
    def __repr__(self) -> str:
        return "REQUIRED"


REQUIRED: Any = _Required()


@dataclass(frozen=True)
class Option:
    """One option of a step: its value kind, default (or REQUIRED) and bounds.

    ``kind`` is one of: ``number`` (int or float, read as float), ``count`` (whole number),
    ``text`` (any scalar, read as text), ``flag`` (true or false), ``capture_name``, ``choice``, ``names`` (list of text),
    ``mapping``, or ``raw`` (checked by the loop expander itself).
    """

    name: str
    kind: str
    default: Any = REQUIRED
    choices: tuple[str, ...] = ()
    minimum: float | None = None
    above: float | None = None
    unit: str = ""
    field: str = ""  # the typed step's field this option fills ("" : the option's own name)
    maximum: float | None = None  # inputs are bounded: a typo of 10^20 frames is refused

    @property
    def field_name(self) -> str:
        return self.field or self.name


@dataclass(frozen=True)
class StepSpec:
    """A kind of step: its options (a mapping body) or its single value (a scalar body), and the
    typed plan step it becomes (``step_type``: each option fills the field its ``field`` names).
    A kind with a ``step_type`` and no special expansion needs nothing else in the expander."""

    kind: str
    example: str
    options: dict[str, Option] = field(default_factory=dict)
    scalar: Option | None = None
    is_loop: bool = False
    step_type: type[StepBase] | None = None


def _spec(kind: str, example: str, *options: Option, is_loop: bool = False,
          step_type: type[StepBase] | None = None) -> StepSpec:
    return StepSpec(kind, example, {o.name: o for o in options}, None, is_loop, step_type)


STEP_SPECS: dict[str, StepSpec] = {
    "blackbody": _spec(
        "blackbody", "blackbody: {mode: difference, value: 10}",
        Option("mode", "choice", choices=("absolute", "difference")),
        Option("value", "number", unit="C or K", field="setpoint"),
        Option("tolerance", "number", 0.02, above=0.0, unit="K", field="tolerance_k"),
        Option("hold", "number", 10.0, minimum=0.0, unit="s", field="hold_s"),
        Option("timeout", "number", 900.0, above=0.0, unit="s", field="timeout_s"),
        step_type=BlackbodyStep,
    ),
    "target": StepSpec("target", "target: pinhole", scalar=Option("target", "text"),
                       step_type=TargetStep),
    "move": StepSpec("move", "move: {az: 10.0, el: -5.0}"),
    "capture": _spec(
        "capture", "capture: {name: flat, frames: 64}",
        Option("name", "capture_name"),
        Option("frames", "count", minimum=1, maximum=MAX_FRAMES_PER_CAPTURE),
        Option("keep", "choice", "average", choices=("average", "stack", "both")),
    ),
    "analyze": _spec(
        "analyze", "analyze: {analysis: distortion, captures: [grid]}",
        Option("analysis", "text"),
        Option("captures", "names"),
        Option("options", "mapping", {}),
    ),
    "align": _spec(
        "align", "align: {tolerance_px: 0.25, max_iterations: 8, frames: 4}",
        Option("tolerance_px", "number", 0.25, above=0.0, unit="px"),
        Option("max_iterations", "count", 8, minimum=1),
        Option("frames", "count", 4, minimum=1),
        Option("origin", "flag", True),
        step_type=AlignStep,
    ),
    "fov_scan": _spec(
        "fov_scan", "fov_scan: {tolerance_deg: 0.02, frames: 2}",
        Option("tolerance_deg", "number", 0.02, above=0.0, unit="deg"),
        Option("frames", "count", 2, minimum=1),
        step_type=FovScanStep,
    ),
    "note": StepSpec("note", 'note: "text for the log"',
                     scalar=Option("note", "text", field="text"), step_type=NoteStep),
    "wait": StepSpec("wait", "wait: 30", scalar=Option("wait", "number", minimum=0.0, unit="s",
                                                       field="duration_s"), step_type=WaitStep),
    "sweep": _spec(
        "sweep", "sweep: {over: diff, values: [2, 5, 10], steps: [...]}",
        Option("over", "raw"), Option("values", "raw"), Option("steps", "raw"),
        is_loop=True,
    ),
    "scan": _spec(
        "scan", "scan: {axes: {az: {from: -20, to: 20, step: 5}}, steps: [...]}",
        Option("axes", "raw"),
        Option("order", "choice", "serpentine", choices=("serpentine", "raster")),
        Option("steps", "raw"),
        is_loop=True,
    ),
}

LOOP_KINDS = frozenset(k for k, s in STEP_SPECS.items() if s.is_loop)


def suggest(word: str, known: Any, what: str = "") -> str:
    """A 'did you mean' hint naming the closest known word, else the list of known words."""
    names = sorted(str(k) for k in known)
    close = difflib.get_close_matches(str(word), names, n=1, cutoff=0.6)
    if close:
        return f"did you mean '{close[0]}'?"
    listed = ", ".join(names) if names else "none"
    return f"known {what or 'names'}: {listed}"


@dataclass
class StepNode:
    """One step as written in the recipe, before references are resolved.

    ``index`` is the 1-based place in its list (the basis of stable plan ids); ``where`` points at
    the step's list item; ``body`` is the value under the step's key (a mapping of options or a
    scalar); ``children`` are the steps of a loop's body.
    """

    kind: str
    index: int
    where: SourceRef
    body: Any
    body_ref: SourceRef
    children: list["StepNode"] = field(default_factory=list)
    valid: bool = True


def _describe(value: Any) -> str:
    if isinstance(value, str):
        return f"'{value}'"
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    if value is None:
        return "nothing"
    return repr(value)


def parse_steps(raw: Any, where: SourceRef, problems: list[Problem]) -> list[StepNode]:
    """Check the shape of a step list and turn it into :class:`StepNode` objects.

    Appends a :class:`Problem` for every shape error and keeps going, so that one pass reports
    everything; steps that cannot be understood are left out of the result.
    """
    if not isinstance(raw, list):
        problems.append(Problem(where, f"'steps' must be a list of steps, not {_describe(raw)}",
                                "write each step on its own line starting with '- '"))
        return []
    nodes: list[StepNode] = []
    for i, item in enumerate(raw):
        node = _parse_one(item, i + 1, raw.ref_of(i) if isinstance(raw, MarkedList) else where,
                          problems)
        if node is not None:
            nodes.append(node)
    return nodes


def _parse_one(item: Any, index: int, where: SourceRef, problems: list[Problem]) -> StepNode | None:
    if not isinstance(item, dict) or not item:
        problems.append(Problem(where, f"a step must be a mapping such as 'note: text', "
                                       f"not {_describe(item)}",
                                f"known steps: {', '.join(STEP_SPECS)}"))
        return None
    keys = list(item)
    if len(keys) > 1:
        extra_where = item.key_ref(keys[1]) if isinstance(item, MarkedDict) else where
        first = keys[0]
        hint = (f"indent the options under '{first}:' by two more spaces"
                if first in STEP_SPECS and item[first] is None
                else "start each step with its own '- '")
        problems.append(Problem(extra_where, f"a step has exactly one key naming its kind; found "
                                             f"{', '.join(str(k) for k in keys)}", hint))
        return None
    kind = keys[0]
    key_where = item.key_ref(kind) if isinstance(item, MarkedDict) else where
    spec = STEP_SPECS.get(kind)
    if spec is None:
        problems.append(Problem(key_where, f"unknown step '{kind}'", suggest(kind, STEP_SPECS, "steps")))
        return None
    body = item[kind]
    body_ref = ref_in(item, kind, where)
    node = StepNode(kind, index, key_where, body, body_ref)
    if spec.scalar is not None:
        if isinstance(body, (dict, list)) or body is None:
            problems.append(Problem(body_ref, f"'{kind}' takes a single value, not "
                                              f"{_describe(body)}", f"for example {spec.example}"))
            return None
        return node
    if kind == "move":
        if not isinstance(body, dict) or not body:
            problems.append(Problem(body_ref, f"'move' needs a mapping of axis positions, not "
                                              f"{_describe(body)}", f"for example {spec.example}"))
            return None
        return node
    if not isinstance(body, dict):
        problems.append(Problem(body_ref, f"'{kind}' needs a mapping of options, not "
                                          f"{_describe(body)}", f"for example {spec.example}"))
        return None
    ok = True
    meant: set[str] = set()  # options a misspelt key probably stands for
    for key in body:
        if key not in spec.options:
            problems.append(Problem(ref_in_key(body, key, body_ref), f"unknown option '{key}' for "
                                    f"{kind}", suggest(key, spec.options, f"options of {kind}")))
            meant.update(difflib.get_close_matches(str(key), list(spec.options), n=1, cutoff=0.6))
            ok = False
    for name, option in spec.options.items():
        if option.default is REQUIRED and name not in body and name not in meant:
            problems.append(Problem(key_where, f"{kind} is missing its '{name}' option",
                                    f"for example {spec.example}"))
            ok = False
    if spec.is_loop and "steps" in body:
        steps_raw = body["steps"]
        steps_where = ref_in(body, "steps", body_ref)
        if isinstance(steps_raw, list) and not steps_raw:
            problems.append(Problem(steps_where, f"the {kind} has no steps to repeat",
                                    "list at least one step under 'steps:'"))
            ok = False
        node.children = parse_steps(steps_raw, steps_where, problems)
    node.valid = ok
    return node


def ref_in_key(container: Any, key: Any, fallback: SourceRef) -> SourceRef:
    """Position of a key's text if the container knows it."""
    if isinstance(container, MarkedDict):
        return container.key_ref(key)
    return fallback


def coerce_value(option: Option, value: Any, where: SourceRef, label: str,
                 problems: list[Problem]) -> tuple[bool, Any]:
    """Check one resolved value against its option; return (ok, value in its canonical type)."""
    what = f"{label} {option.name}" if label and label != option.name else option.name
    unit = f" {option.unit}" if option.unit else ""

    def fail(message: str, hint: str) -> tuple[bool, Any]:
        problems.append(Problem(where, message, hint))
        return False, None

    kind = option.kind
    if kind == "number":
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            return fail(f"{what} must be a number{unit}, not {_describe(value)}",
                        "write a plain number such as 10 or 2.5")
        value = float(value)
    elif kind == "count":
        if isinstance(value, bool) or not isinstance(value, int):
            return fail(f"{what} must be a whole number, not {_describe(value)}",
                        "write a plain whole number such as 16")
    elif kind == "flag":
        if not isinstance(value, bool):
            return fail(f"{what} must be true or false, not {_describe(value)}",
                        "write true or false")
    elif kind == "text":
        if isinstance(value, (dict, list)) or value is None:
            return fail(f"{what} must be text, not {_describe(value)}", "write it as a single value")
        value = str(value)
    elif kind == "capture_name":
        if isinstance(value, str) and ("/" in value or "\\" in value):
            return fail(f"capture name '{value}' contains a path separator",
                        "a capture name becomes a file name inside the run folder's frames/: "
                        "use letters, digits, '_', '-' or '.' only")
        if not isinstance(value, str) or not CAPTURE_NAME_PATTERN.match(value):
            return fail(f"capture name {_describe(value)} is not a plain name",
                        "use letters, digits, '_', '-' or '.', starting with a letter; loop values "
                        "are added to the name automatically")
    elif kind == "choice":
        if value not in option.choices:
            return fail(f"{what} must be one of {', '.join(option.choices)}, not {_describe(value)}",
                        suggest(value, option.choices, "choices")
                        if isinstance(value, str) else f"for example {option.choices[0]}")
    elif kind == "names":
        if not isinstance(value, list) or not value or not all(isinstance(v, str) for v in value):
            return fail(f"{what} must be a non-empty list of capture names, not {_describe(value)}",
                        "for example [grid] or [flat, hot]")
        value = list(value)
    elif kind == "mapping":
        if not isinstance(value, dict):
            return fail(f"{what} must be a mapping, not {_describe(value)}",
                        "for example {mode: grid}")
    if option.minimum is not None and value < option.minimum:
        return fail(f"{what} must be at least {option.minimum:g}{unit}, not {value:g}",
                    f"use {option.minimum:g} or more")
    if option.above is not None and value <= option.above:
        return fail(f"{what} must be greater than {option.above:g}{unit}, not {value:g}",
                    "use a positive value")
    if option.maximum is not None and value > option.maximum:
        return fail(f"{what} must be at most {option.maximum:g}{unit}, not {value:g}",
                    "split a longer acquisition into several steps")
    return True, value


def coerce_options(spec: StepSpec, values: dict[str, Any], refs: Callable[[str], SourceRef],
                   problems: list[Problem]) -> dict[str, Any] | None:
    """Check every option of a mapping-bodied step; fill defaults. None if any value is bad."""
    out: dict[str, Any] = {}
    ok = True
    for name, option in spec.options.items():
        if option.kind == "raw":
            continue
        if name not in values:
            if option.default is REQUIRED:
                return None  # already reported while parsing
            default = option.default
            out[name] = dict(default) if isinstance(default, dict) else default
            continue
        good, value = coerce_value(option, values[name], refs(name), spec.kind, problems)
        ok = ok and good
        out[name] = value
    if ok and spec.kind == "blackbody" and out["timeout"] <= out["hold"]:
        problems.append(Problem(refs("timeout"), f"blackbody timeout {out['timeout']:g} s is not "
                                                 f"longer than its hold time {out['hold']:g} s",
                                "the setpoint could never be declared stable: raise the timeout"))
        ok = False
    return out if ok else None


def station_problems(step: PlanStep, refs: Callable[[str], SourceRef],
                     facts: StationFacts) -> list[Problem]:
    """Check one resolved step against the station: targets, limits, axes and analyses.

    ``refs`` gives where each option of the step is written (``refs("value")``, ``refs(axis)``).
    The limits themselves are the station's (``facts.limits``): one answer everywhere.
    """
    found: list[Problem] = []
    if isinstance(step, BlackbodyStep):
        refusal = facts.limits.setpoint_problem(step.mode, step.setpoint)
        if refusal is not None:
            found.append(Problem(refs("value"), refusal.message, refusal.hint))
    elif isinstance(step, TargetStep):
        if step.target not in facts.targets:
            found.append(Problem(refs("name"), f"target '{step.target}' is not on the wheel",
                                 f"the wheel holds: {', '.join(sorted(facts.targets))}"))
    elif isinstance(step, MoveStep):
        found.extend(axis_problems({a: (v, v) for a, v in step.position.items()}, refs, facts))
    elif isinstance(step, AnalyzeStep):
        if step.analysis not in facts.analyses:
            found.append(Problem(refs("analysis"), f"unknown analysis '{step.analysis}'",
                                 suggest(step.analysis, facts.analyses, "analyses")))
    return found


def axis_problems(reach: Mapping[str, tuple[float, float]], refs: Callable[[str], SourceRef],
                  facts: StationFacts) -> list[Problem]:
    """Unknown axes and positions outside soft limits.

    ``reach`` gives, per axis, the lowest and highest value the step (a move, or a whole scan)
    visits, so that a scan of hundreds of positions gives one message per axis rather than one
    per position.
    """
    found: list[Problem] = []
    for axis, (low, high) in reach.items():
        refusal = facts.limits.position_problem(axis, low, high)
        if refusal is not None:
            found.append(Problem(refs(axis), refusal.message, refusal.hint))
    return found
