"""The station's facts for recipe validation, with the analyses' checks of the whole plan."""

from __future__ import annotations

from collections.abc import Sequence

from sequences.facts import StationFacts
from sequences.plansteps import PlanStep
from sequences.yamlsource import Problem
from station.analyses.registry import Registry
from station.inputs.config import StationConfig

__all__ = ["recipe_facts"]


def recipe_facts(station: StationConfig, registry: Registry) -> StationFacts:
    """StationFacts whose plan check runs every analysis's option and capture checks."""

    def target_kind(name: str) -> str | None:
        target = station.target_named(name)
        return None if target is None else str(target.kind)

    def check_plan(steps: Sequence[PlanStep]) -> list[Problem]:
        return registry.plan_problems(steps, target_kind, station.limits.axis_units())

    return station.facts(registry.names, check_plan)
