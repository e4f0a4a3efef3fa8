"""The station's facts for recipe validation, with the analyses' checks of the whole plan."""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence

from sequences.facts import StationFacts
from sequences.plansteps import AlignStep, FovScanStep, PlanStep, TargetStep
from sequences.yamlsource import Problem
from station.analyses.registry import Registry
from station.inputs.config import StationConfig

__all__ = ["recipe_facts", "closed_loop_problems"]


def recipe_facts(station: StationConfig, registry: Registry) -> StationFacts:
    """StationFacts whose plan check runs every analysis's option and capture checks."""

    def target_kind(name: str) -> str | None:
        target = station.target_named(name)
        return None if target is None else str(target.kind)

    def check_plan(steps: Sequence[PlanStep]) -> list[Problem]:
        units = station.limits.axis_units()
        return (registry.plan_problems(steps, target_kind, units)
                + closed_loop_problems(steps, target_kind, units))

    return station.facts(registry.names, check_plan)


def closed_loop_problems(steps: Sequence[PlanStep], target_kind: Callable[[str], str | None],
                         axis_units: Mapping[str, str]) -> list[Problem]:
    """`align` and `fov_scan` need the single pinhole in the beam (the last `target:` before
    them) and a gimbal with az and el in degrees: said at check time, before anything moves."""
    problems: list[Problem] = []
    target: str | None = None
    for step in steps:
        if isinstance(step, TargetStep):
            target = step.target
        if not isinstance(step, (AlignStep, FovScanStep)):
            continue
        kind = target_kind(target) if target is not None else None
        if kind != "single_pinhole":
            shown = f"'{target}' ({kind})" if target is not None else "no target chosen before it"
            problems.append(Problem(step.source, f"{step.kind} needs the single pinhole in the "
                                                 f"beam; the plan has {shown}",
                                    "put a 'target:' step naming the station's single pinhole "
                                    "before it"))
        bad = [a for a in ("az", "el") if axis_units.get(a) not in ("deg", "degree", "degrees")]
        if bad:
            have = ", ".join(f"{a} ({u})" for a, u in axis_units.items()) or "none"
            problems.append(Problem(step.source, f"{step.kind} needs a gimbal with az and el in "
                                                 f"degrees; the stage has {have}",
                                    "run it on a station whose stage has az and el axes"))
    return problems
