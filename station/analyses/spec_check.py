"""The spec contract: every spec key of a UUT file is a quantity some analysis declares.

`nightbench check` (and every run, before anything moves) refuses a spec key no registered
analysis evaluates, naming its line in the UUT file and the closest known key; it warns about a
key the recipe's analyses do not judge (the UUT file describes the camera, not one recipe, so
that key is simply not judged by this run), and about a recipe whose planned conditions differ
from those the spec states (NETD measured at a 2 K difference against a spec at 30 C over 20 C).
"""

from __future__ import annotations

import difflib
from collections.abc import Mapping, Sequence

from analysis.uut import UutSpec
from sequences.plansteps import AnalyzeStep, PlanStep
from sequences.yamlsource import Problem, SourceRef
from station.analyses.registry import Registry

__all__ = ["spec_findings", "DIFFERENCE_TOLERANCE_K", "TEMPERATURE_TOLERANCE_C"]

DIFFERENCE_TOLERANCE_K = 0.5
TEMPERATURE_TOLERANCE_C = 1.0


def spec_findings(uut: UutSpec, sources: Mapping[str, SourceRef], fallback: SourceRef,
                  steps: Sequence[PlanStep], registry: Registry
                  ) -> tuple[list[Problem], list[Problem]]:
    """(problems that refuse the inputs, warnings to show) for the UUT's spec keys."""
    declared = {key: name for name, a in registry.items() for key in a.spec_keys}
    analyze = [s for s in steps if isinstance(s, AnalyzeStep) and s.analysis in registry]
    used = {s.analysis for s in analyze}
    problems: list[Problem] = []
    warnings: list[Problem] = []
    unjudged: list[tuple[SourceRef, str, str]] = []
    for key in uut.spec_limits:
        where = sources.get(key, fallback)
        if key not in declared:
            close = difflib.get_close_matches(key, sorted(declared), n=1, cutoff=0.6)
            hint = (f"did you mean '{close[0]}'?" if close else
                    "spec keys an analysis evaluates: " + ", ".join(sorted(declared)))
            problems.append(Problem(where, f"spec key '{key}' is not a quantity any analysis "
                                           "evaluates, so it could never be judged", hint))
        elif declared[key] not in used:
            unjudged.append((where, key, declared[key]))
    if unjudged:  # one line for all of them: a UUT file covers more than one recipe measures
        listed = ", ".join(f"{key} ({name})" for _, key, name in unjudged)
        warnings.append(Problem(unjudged[0][0], f"{len(unjudged)} spec key(s) not judged by "
                                f"this recipe: {listed}",
                                "their analyses are not in the recipe; add them to judge those "
                                "limits"))
    for step in analyze:
        analysis = registry[step.analysis]
        planned = analysis.planned_conditions(step, steps)
        for key in analysis.spec_keys:
            stated = uut.spec_conditions.get(key)
            if key not in uut.spec_limits or not stated or not planned:
                continue
            differ = _differences(stated, planned)
            if differ:
                at = sources.get(key, fallback)
                warnings.append(Problem(step.source, f"{step.analysis} measures '{key}' at "
                                        f"{differ}, but the UUT file ({at.file}:{at.line}) "
                                        f"states it at {_conditions_text(stated)}",
                                        "the verdict will judge a value measured at other "
                                        "conditions; set the blackbody to the spec's "
                                        "conditions for the capture this analysis uses"))
    return problems, warnings


def _conditions_text(conditions: Mapping[str, float]) -> str:
    return ", ".join(f"{k} = {v:g}" for k, v in conditions.items())


def _differences(stated: Mapping[str, float], planned: Mapping[str, float]) -> str:
    """The planned conditions that differ from the stated ones, as text ('' when they agree).

    A planned blackbody difference is compared with the spec's source minus background.
    """
    out = []
    source = stated.get("source_c")
    if "difference_min_k" in planned and source is not None:
        lo, hi = planned["difference_min_k"], planned["difference_max_k"]
        out.append(f"flats set {lo:g} to {hi:g} K over the lab's reference, whose temperature "
                   f"the recipe does not set: they bracket source_c = {source:g} only for a "
                   f"reference between {source - hi:g} and {source - lo:g} C"
                   + (f", and the background is that reference, not {stated['background_c']:g} C"
                      if "background_c" in stated else ""))
    if "source_min_c" in planned and source is not None:
        lo, hi = planned["source_min_c"], planned["source_max_c"]
        if not lo - TEMPERATURE_TOLERANCE_C <= source <= hi + TEMPERATURE_TOLERANCE_C:
            out.append(f"flats at source temperatures {lo:g} to {hi:g} C, which do not bracket "
                       f"source_c = {source:g} (the noise there would be extrapolated)")
    if "difference_k" in planned and "source_c" in stated and "background_c" in stated:
        spec_difference = stated["source_c"] - stated["background_c"]
        if abs(planned["difference_k"] - spec_difference) > DIFFERENCE_TOLERANCE_K:
            out.append(f"a {planned['difference_k']:g} K blackbody difference over the lab's "
                       f"reference (the spec's is {spec_difference:g} K)")
    for name, value in planned.items():
        if name in stated and name in ("source_c", "background_c") and abs(stated[name] - value) > TEMPERATURE_TOLERANCE_C:
            out.append(f"{name} = {value:g}")
    return "; ".join(out)
