"""Expansion of a recipe into a flat plan of concrete steps with stable ids.

Loops are unrolled, references ``${name}`` are replaced by parameter and loop values, every value
is checked against its option and (when station facts are given) against the station. The same
walk serves validation (:func:`expand_nodes` collects problems) and expansion (:func:`expand`).

Step ids
--------
Ids describe the *structure* of the recipe, never its values, so they stay the same when a
parameter changes a setpoint or a frame count. A step is ``s<n>`` (its 1-based place in its list)
followed by its kind; a loop adds its kind and a 1-based iteration number, and the steps inside
follow::

    s1.target                        first top-level step
    s3.sweep[2].s1.blackbody         step 1 in the second pass of the sweep at step 3
    s4.scan[17].move                 the stage move the scan makes at its 17th position
    s4.scan[17].s2.capture           step 2 of the scan body at that position

Capture instances
-----------------
A capture outside any loop keeps its name (``grid``). Inside loops its instance name adds the loop
values, outermost first: ``flat[diff=5]``, ``spot[az=-20,el=10]``, ``spot[diff=5,az=-20,el=10]``.
The plain name (the *group*) stands, in ``analyze``, for every instance made so far.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from typing import Any, Callable, Protocol

from sequences.facts import StationFacts
from sequences.plansteps import (AnalyzeStep, CaptureStep, LoopValue, MoveStep, PlanStep,
                                 TargetStep)
from sequences.steps import (NAME_PATTERN, STEP_SPECS, Option, StepNode, axis_problems,
                             coerce_options, coerce_value, station_problems, suggest)
from sequences.yamlsource import MarkedDict, MarkedList, Problem, SourceError, SourceRef

__all__ = ["PlanStep", "Plan", "expand", "expand_nodes", "substitute", "instance_name",
           "MAX_PLAN_STEPS"]

MAX_PLAN_STEPS = 200_000

_WHOLE_REF = re.compile(r"^\$\{\s*([^{}]*?)\s*\}$")
_ANY_REF = re.compile(r"\$\$\{|\$\{([^{}]*)\}")


@dataclass
class Plan:
    """A recipe expanded for one station: the steps in run order and what they will capture."""

    recipe: str
    description: str
    file: str
    parameters: dict[str, Any]
    steps: list[PlanStep]
    captures: list[str]
    frames_total: int
    groups: dict[str, list[str]] = field(default_factory=dict)

    def capture_step(self, name: str) -> CaptureStep:
        """The capture step making instance ``name`` (KeyError naming it if none does)."""
        for s in self.steps:
            if isinstance(s, CaptureStep) and s.name == name:
                return s
        raise KeyError(f"no capture '{name}' in plan of recipe '{self.recipe}'")

    def step(self, step_id: str) -> PlanStep:
        """The step with this id (KeyError naming the id if there is none)."""
        for s in self.steps:
            if s.id == step_id:
                return s
        raise KeyError(f"no step with id '{step_id}' in plan of recipe '{self.recipe}'")


def format_value(value: Any) -> str:
    """Short text of a loop value for instance names: 5.0 -> '5', 2.5 -> '2.5'."""
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return repr(value) if isinstance(value, float) else str(value)


def instance_name(group: str, context: dict[str, LoopValue]) -> str:
    """``group`` outside loops, else ``group[var=value,...]`` with the loop values."""
    if not context:
        return group
    inner = ",".join(f"{k}={format_value(v)}" for k, v in context.items())
    return f"{group}[{inner}]"


def substitute(value: Any, env: dict[str, Any], where: SourceRef,
               problems: list[Problem]) -> tuple[bool, Any]:
    """Replace ``${name}`` references; return (ok, plain value without marks).

    A string that is exactly one reference takes the referenced value with its type (a number
    stays a number, a list a list); references inside longer strings are interpolated as text.
    ``$${`` writes a literal ``${``.
    """
    if isinstance(value, dict):
        out: dict[Any, Any] = {}
        ok = True
        for k, v in value.items():
            child = value.ref_of(k) if isinstance(value, MarkedDict) else where
            good, out[k] = substitute(v, env, child, problems)
            ok = ok and good
        return ok, out
    if isinstance(value, list):
        items = []
        ok = True
        for i, v in enumerate(value):
            child = value.ref_of(i) if isinstance(value, MarkedList) else where
            good, item = substitute(v, env, child, problems)
            ok = ok and good
            items.append(item)
        return ok, items
    if not isinstance(value, str) or "${" not in value:
        return True, value
    whole = _WHOLE_REF.match(value)
    if whole and not value.startswith("$${"):
        name = whole.group(1)
        if not _known(name, env, where, problems):
            return False, None
        found = env[name]
        return True, list(found) if isinstance(found, list) else found
    ok = True

    def replace(match: re.Match[str]) -> str:
        nonlocal ok
        if match.group(0) == "$${":
            return "${"
        name = match.group(1).strip()
        if not _known(name, env, where, problems):
            ok = False
            return match.group(0)
        return format_value(env[name])

    text = _ANY_REF.sub(replace, value)
    return ok, (text if ok else None)


def _known(name: str, env: dict[str, Any], where: SourceRef, problems: list[Problem]) -> bool:
    if not NAME_PATTERN.match(name):
        problems.append(Problem(where, f"'${{{name}}}' is not a valid reference",
                                "a reference is ${name} with a parameter or loop variable name"))
        return False
    if name not in env:
        hint = suggest(name, env, "names here")
        problems.append(Problem(where, f"unknown reference ${{{name}}}",
                                f"declare it under 'parameters:' or use a loop variable; {hint}"))
        return False
    return True


class _PlanLimit(Exception):
    """Raised inside the walk when a plan grows beyond MAX_PLAN_STEPS."""


class _Expander:
    """Walks the step tree once, unrolling loops, resolving and checking every value."""

    def __init__(self, facts: StationFacts | None, problems: list[Problem],
                 all_captures: dict[str, SourceRef]) -> None:
        self.facts = facts
        self.problems = problems
        self.all_captures = all_captures  # every capture name written, with where it is written
        self.steps: list[PlanStep] = []
        self.captures: list[str] = []
        self.instances: set[str] = set()
        self.groups: dict[str, list[str]] = {}
        self.group_where: dict[str, SourceRef] = {}
        self.frames_total = 0
        self.unknowable: set[str] = set()  # captures of steps that could not be expanded
        self.target: str | None = None  # what the plan has put in the beam so far
        self.pose: dict[str, float] = {}  # where the plan has left the stage so far

    # -- helpers -------------------------------------------------------------------------------
    def add(self, step: PlanStep, node: StepNode, *, check: bool = True) -> None:
        if len(self.steps) >= MAX_PLAN_STEPS:
            self.problems.append(Problem(node.where, f"the plan grows beyond {MAX_PLAN_STEPS} steps",
                                         "use coarser scan steps or fewer sweep values"))
            raise _PlanLimit
        if check and self.facts is not None:
            self.problems.extend(station_problems(step, self.refs_of(node), self.facts))
        self.steps.append(step)

    @staticmethod
    def refs_of(node: StepNode) -> Callable[[str], SourceRef]:
        body = node.body
        if isinstance(body, MarkedDict):
            return lambda key: body.ref_of(key)
        return lambda key: node.body_ref

    # -- the walk ------------------------------------------------------------------------------
    def run(self, nodes: list[StepNode], env: dict[str, Any], prefix: str,
            context: dict[str, LoopValue]) -> None:
        for node in nodes:
            step_id = f"{prefix}s{node.index}"
            count = len(self.steps)
            if node.valid:
                special = getattr(self, f"do_{node.kind}", None)
                if special is not None:
                    special(node, env, step_id, context)
                else:
                    self.do_typed(node, env, step_id, context)
            if not node.valid or (len(self.steps) == count and node.kind in ("capture", "sweep",
                                                                              "scan")):
                self.forget(node)

    def forget(self, node: StepNode) -> None:
        """A step that could not be expanded: later uses of its captures are not errors of their
        own (the step's problem is already reported)."""
        self.unknowable.update(collect_capture_names([node], {}))

    def scalar(self, node: StepNode, env: dict[str, Any]) -> tuple[bool, Any]:
        spec = STEP_SPECS[node.kind]
        ok, value = substitute(node.body, env, node.body_ref, self.problems)
        if not ok:
            return False, None
        assert spec.scalar is not None
        return coerce_value(spec.scalar, value, node.body_ref, "", self.problems)

    def do_typed(self, node: StepNode, env: dict[str, Any], step_id: str,
                 context: dict[str, LoopValue]) -> PlanStep | None:
        """Any kind declared with a ``step_type``: its checked options fill the typed step."""
        spec = STEP_SPECS[node.kind]
        assert spec.step_type is not None, f"step kind {node.kind} declares no step_type"
        if spec.scalar is not None:
            ok, value = self.scalar(node, env)
            if not ok:
                return None
            values = {spec.scalar.field_name: value}
        else:
            options = self.options(node, env)
            if options is None:
                return None
            values = {spec.options[k].field_name: v for k, v in options.items()}
        step = spec.step_type(f"{step_id}.{node.kind}", node.where, dict(context), **values)
        self.add(step, node)  # type: ignore[arg-type]
        return step  # type: ignore[return-value]

    def do_target(self, node: StepNode, env: dict[str, Any], step_id: str,
                  context: dict[str, LoopValue]) -> None:
        step = self.do_typed(node, env, step_id, context)
        if isinstance(step, TargetStep):
            self.target = step.target  # what the plan puts in the beam from here on

    def options(self, node: StepNode, env: dict[str, Any]) -> dict[str, Any] | None:
        ok, values = substitute(node.body, env, node.body_ref, self.problems)
        if not ok:
            return None
        return coerce_options(STEP_SPECS[node.kind], values, self.refs_of(node), self.problems)

    def do_move(self, node: StepNode, env: dict[str, Any], step_id: str,
                context: dict[str, LoopValue]) -> None:
        ok, values = substitute(node.body, env, node.body_ref, self.problems)
        if not ok:
            return
        refs = self.refs_of(node)
        position: dict[str, float] = {}
        for axis, value in values.items():
            good, number = coerce_value(Option(str(axis), "number"), value, refs(axis),
                                        "move", self.problems)
            ok = ok and good
            position[str(axis)] = number
        if not ok:
            return
        self.add(MoveStep(f"{step_id}.move", node.where, dict(context), position=position), node)
        self.pose.update(position)

    def do_capture(self, node: StepNode, env: dict[str, Any], step_id: str,
                   context: dict[str, LoopValue]) -> None:
        params = self.options(node, env)
        if params is None:
            return
        group = params["name"]
        first = self.group_where.setdefault(group, node.where)
        if first != node.where:
            self.problems.append(Problem(self.refs_of(node)("name"),
                                         f"capture name '{group}' is already used",
                                         f"it is first defined at line {first.line}; "
                                         "give this capture a name of its own"))
            return
        name = instance_name(group, context)
        if name in self.instances:
            self.problems.append(Problem(self.refs_of(node)("name"),
                                         f"capture '{name}' would be made twice",
                                         "a loop repeats a value; make the loop values distinct"))
            return
        self.instances.add(name)
        self.captures.append(name)
        self.groups.setdefault(group, []).append(name)
        self.frames_total += params["frames"]
        self.add(CaptureStep(f"{step_id}.capture", node.where, dict(context), name=name,
                             group=group, frames=params["frames"], keep=params["keep"],
                             target=self.target, pose=dict(self.pose)), node)

    def do_analyze(self, node: StepNode, env: dict[str, Any], step_id: str,
                   context: dict[str, LoopValue]) -> None:
        params = self.options(node, env)
        if params is None:
            return
        refs = self.refs_of(node)
        instances: list[str] = []
        ok = True
        for name in params["captures"]:
            if name.split("[", 1)[0] in self.unknowable and name not in self.instances:
                ok = False
            elif name in self.groups:
                instances.extend(n for n in self.groups[name] if n not in instances)
            elif name in self.instances:
                if name not in instances:
                    instances.append(name)
            elif "[" in name and name.split("[", 1)[0] in self.groups:
                made = self.groups[name.split("[", 1)[0]]
                shown = ", ".join(made[:4]) + (", ..." if len(made) > 4 else "")
                self.problems.append(Problem(refs("captures"),
                                             f"no capture instance '{name}' is made before this "
                                             "step", f"instances so far: {shown}"))
                ok = False
            elif name.split("[", 1)[0] in self.all_captures:
                later = self.all_captures[name.split("[", 1)[0]]
                self.problems.append(Problem(refs("captures"),
                                             f"capture '{name}' is used before it is defined",
                                             f"it is defined at line {later.line}; move this "
                                             "analyze after that capture"))
                ok = False
            else:
                self.problems.append(Problem(refs("captures"),
                                             f"no capture step defines '{name}'",
                                             suggest(name, self.all_captures, "captures")))
                ok = False
        if not ok:
            return
        options = params["options"]
        option_refs: dict[str, SourceRef] = {}
        plain: dict[str, Any] = {}
        raw_options = node.body.get("options") if isinstance(node.body, dict) else None
        for key, value in options.items():
            where = (raw_options.ref_of(key) if isinstance(raw_options, MarkedDict)
                     else refs("options"))
            if isinstance(value, (dict, list)) or value is None:
                self.problems.append(Problem(where, f"analysis option '{key}' must be a single "
                                                    f"value, not {value!r}",
                                             "for example mode: grid"))
                ok = False
                continue
            option_refs[str(key)] = where
            plain[str(key)] = value
        if not ok:
            return
        self.add(AnalyzeStep(f"{step_id}.analyze", node.where, dict(context),
                             analysis=params["analysis"], captures=tuple(params["captures"]),
                             instances=tuple(instances), options=plain,
                             option_refs=option_refs, captures_ref=refs("captures")), node)

    def loop_variable(self, name: Any, where: SourceRef, env: dict[str, Any]) -> bool:
        if not isinstance(name, str) or not NAME_PATTERN.match(name):
            self.problems.append(Problem(where, f"loop variable {name!r} is not a plain name",
                                         "use letters, digits and '_', starting with a letter"))
            return False
        if name in env:
            self.problems.append(Problem(where, f"loop variable '{name}' hides a parameter or an "
                                                "outer loop variable of the same name",
                                         "rename the loop variable"))
            return False
        return True

    def do_sweep(self, node: StepNode, env: dict[str, Any], step_id: str,
                 context: dict[str, Any]) -> None:
        body = node.body
        refs = self.refs_of(node)
        over = body["over"]
        if not self.loop_variable(over, refs("over"), env):
            return
        ok, values = substitute(body["values"], env, refs("values"), self.problems)
        if not ok:
            return
        if not isinstance(values, list):
            self.problems.append(Problem(refs("values"), f"sweep values must be a list, not "
                                                         f"{values!r}", "for example [2, 5, 10]"))
            return
        if not values:
            self.problems.append(Problem(refs("values"), "sweep values must not be empty",
                                         "list at least one value, for example [2, 5, 10]"))
            return
        for i, value in enumerate(values, start=1):
            if isinstance(value, (dict, list)) or value is None:
                self.problems.append(Problem(refs("values"), f"sweep value {i} must be a single "
                                                             "number or word",
                                             "for example [2, 5, 10]"))
                return
        for i, value in enumerate(values, start=1):
            self.run(node.children, {**env, over: value}, f"{step_id}.sweep[{i}].",
                     {**context, over: value})

    def do_scan(self, node: StepNode, env: dict[str, Any], step_id: str,
                context: dict[str, Any]) -> None:
        body = node.body
        refs = self.refs_of(node)
        axes_raw = body["axes"]
        if not isinstance(axes_raw, dict) or not axes_raw:
            self.problems.append(Problem(refs("axes"), "scan axes must be a mapping of axis "
                                                       "ranges", "for example {az: {from: -20, "
                                                       "to: 20, step: 5}, el: [-10, 0, 10]}"))
            return
        order_ok, order = coerce_value(STEP_SPECS["scan"].options["order"],
                                       body.get("order", "serpentine"), refs("order"), "scan",
                                       self.problems)
        axis_values: dict[str, list[float]] = {}
        ok = order_ok
        for axis, spec in axes_raw.items():
            where = axes_raw.ref_of(axis) if isinstance(axes_raw, MarkedDict) else refs("axes")
            if not self.loop_variable(axis, where, env):
                ok = False
                continue
            values = self.axis_values(axis, spec, where, env)
            if values is None:
                ok = False
                continue
            axis_values[axis] = values
        if not ok:
            return
        if self.facts is not None:
            reach = {a: (min(v), max(v)) for a, v in axis_values.items()}
            axis_refs = (axes_raw.ref_of if isinstance(axes_raw, MarkedDict)
                         else (lambda _a: refs("axes")))
            found = axis_problems(reach, axis_refs, self.facts)
            if found:
                self.problems.extend(found)
                return
        for i, position in enumerate(grid(axis_values, order), start=1):
            scan_id = f"{step_id}.scan[{i}]"
            self.add(MoveStep(f"{scan_id}.move", node.where, {**context, **position},
                              position=dict(position)), node, check=False)
            self.pose.update(position)
            self.run(node.children, {**env, **position}, f"{scan_id}.", {**context, **position})

    def axis_values(self, axis: str, spec: Any, where: SourceRef,
                    env: dict[str, Any]) -> list[float] | None:
        ok, value = substitute(spec, env, where, self.problems)
        if not ok:
            return None
        number = Option(axis, "number")
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            value = [value]
        if isinstance(value, list):
            if not value:
                self.problems.append(Problem(where, f"scan axis '{axis}' lists no positions",
                                             "list at least one position"))
                return None
            out = []
            for item in value:
                good, number_value = coerce_value(number, item, where, "scan axis", self.problems)
                if not good:
                    return None
                out.append(item if isinstance(item, int) else number_value)
            return out
        if not isinstance(value, dict):
            self.problems.append(Problem(where, f"scan axis '{axis}' must be a range or a list",
                                         "for example {from: -20, to: 20, step: 5} or [-10, 0, 10]"))
            return None
        extra = [k for k in value if k not in ("from", "to", "step")]
        missing = [k for k in ("from", "to", "step") if k not in value]
        if extra or missing:
            words = ([f"unknown key '{extra[0]}'"] if extra else []) + \
                    ([f"missing {', '.join(missing)}"] if missing else [])
            hint = suggest(extra[0], ("from", "to", "step"), "keys") if extra else \
                "a range is {from: -20, to: 20, step: 5}"
            self.problems.append(Problem(where, f"scan range of '{axis}': {'; '.join(words)}", hint))
            return None
        nums = {}
        for k in ("from", "to", "step"):
            child = spec.ref_of(k) if isinstance(spec, MarkedDict) else where
            good, nums[k] = coerce_value(Option(k, "number"), value[k], child,
                                         f"scan {axis}", self.problems)
            if not good:
                return None
        start, stop, step = nums["from"], nums["to"], nums["step"]
        step_where = spec.ref_of("step") if isinstance(spec, MarkedDict) else where
        if step == 0:
            self.problems.append(Problem(step_where, f"scan step of '{axis}' must not be 0",
                                         "use a positive step to go up, a negative one to go down"))
            return None
        if (stop - start) * step < 0:
            self.problems.append(Problem(step_where, f"scan step {step:g} of '{axis}' goes away "
                                                     f"from 'to' ({start:g} -> {stop:g})",
                                         f"use step {-step:g}"))
            return None
        count = math.floor((stop - start) / step + 1e-9) + 1
        if count > MAX_PLAN_STEPS:
            self.problems.append(Problem(step_where, f"scan of '{axis}' would visit {count} "
                                                     "positions", "use a coarser step"))
            return None
        all_int = all(isinstance(value[k], int) and not isinstance(value[k], bool)
                      for k in ("from", "to", "step"))
        if all_int:
            return [int(start + i * step) for i in range(count)]
        return [round(start + i * step, 9) for i in range(count)]


def grid(axis_values: dict[str, list[float]], order: str) -> list[dict[str, float]]:
    """Stage positions of a scan, the first axis changing slowest.

    ``raster`` runs every inner line in the same direction; ``serpentine`` reverses the inner
    sub-grid on every other outer position, so consecutive positions differ in one axis only
    (a boustrophedon path) and the stage never flies back across the field.
    """
    axes = list(axis_values)
    if not axes:
        return [{}]
    first, rest = axes[0], {a: axis_values[a] for a in axes[1:]}
    inner = grid(rest, order)
    out: list[dict[str, float]] = []
    for i, value in enumerate(axis_values[first]):
        block = inner[::-1] if (order == "serpentine" and i % 2 == 1) else inner
        out.extend({first: value, **pos} for pos in block)
    return out


def collect_capture_names(nodes: list[StepNode], out: dict[str, SourceRef]) -> dict[str, SourceRef]:
    """Every capture name written anywhere in the tree, with where (first) written."""
    for node in nodes:
        if node.kind == "capture" and isinstance(node.body, dict):
            name = node.body.get("name")
            if isinstance(name, str):
                out.setdefault(name, node.where)
        collect_capture_names(node.children, out)
    return out


@dataclass
class Expansion:
    """The raw result of one walk: steps and capture bookkeeping, plus the problems found."""

    steps: list[PlanStep]
    captures: list[str]
    groups: dict[str, list[str]]
    frames_total: int
    problems: list[Problem]


def expand_nodes(nodes: list[StepNode], parameters: dict[str, Any],
                 facts: StationFacts | None) -> Expansion:
    """Walk the tree with the given parameter values; never raises for recipe mistakes.

    With station facts, the station's own checks of the whole plan (``facts.check_plan``: the
    analyses' options and needs) run on the steps that could be expanded, so every problem of a
    recipe comes out of this one walk.
    """
    problems: list[Problem] = []
    walker = _Expander(facts, problems, collect_capture_names(nodes, {}))
    try:
        walker.run(nodes, dict(parameters), "", {})
    except _PlanLimit:
        pass
    if facts is not None and facts.check_plan is not None:
        problems.extend(facts.check_plan(walker.steps))
    unique: dict[tuple[SourceRef, str], Problem] = {}
    for p in problems:
        unique.setdefault((p.where, p.message), p)
    return Expansion(walker.steps, walker.captures, walker.groups, walker.frames_total,
                     list(unique.values()))


def build_plan(name: str, description: str, file: str, parameters: dict[str, Any],
               expansion: Expansion) -> Plan:
    """The plan of a walk that found no problem (raises SourceError listing them otherwise)."""
    if expansion.problems:
        raise SourceError(expansion.problems)
    return Plan(recipe=name, description=description, file=file, parameters=dict(parameters),
                steps=expansion.steps, captures=expansion.captures,
                frames_total=expansion.frames_total, groups=expansion.groups)


class ValidatedRecipe(Protocol):
    """What expansion needs of a recipe (sequences.recipe.Recipe provides it)."""

    plan: Plan


def expand(recipe: ValidatedRecipe) -> Plan:
    """The flat plan of a validated recipe: expanded once, when the recipe was loaded."""
    return recipe.plan
