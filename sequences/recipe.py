"""Loading and validating a recipe file: every problem of the file, with its line, at once.

A recipe is a YAML mapping::

    recipe: flat-pair
    description: two flats at two blackbody differences
    parameters:
      frames: 32
    steps:
      - blackbody: {mode: difference, value: 5}
      - capture: {name: flat, frames: "${frames}"}

:func:`load_recipe` checks the top level, the parameters and command-line overrides, the shape of
every step, then expands the recipe once (see :mod:`sequences.plan`) so that values that depend on
parameters or loop variables are checked too, against the station when facts are given.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import yaml

from sequences.facts import StationFacts
from sequences.plan import Plan, build_plan, expand_nodes
from sequences.steps import NAME_PATTERN, StepNode, parse_steps, suggest
from sequences.yamlsource import (MarkedDict, MarkedList, Problem, SourceError, SourceRef,
                                  load_yaml)

__all__ = ["Recipe", "load_recipe", "TOP_LEVEL_KEYS"]

TOP_LEVEL_KEYS = ("recipe", "description", "parameters", "steps")


@dataclass
class Recipe:
    """A validated recipe: its parameters as used (defaults with overrides applied), its steps as
    written and its plan (expanded once, while validating).

    ``facts`` are the station facts it was validated against (None: recipe-only check).
    """

    name: str
    description: str
    file: str
    parameters: dict[str, Any]
    defaults: dict[str, Any]
    steps: list[StepNode]
    plan: Plan
    facts: StationFacts | None = None
    overrides: dict[str, Any] = field(default_factory=dict)


def _type_name(value: Any) -> str:
    if isinstance(value, bool):
        return "true or false"
    if isinstance(value, int):
        return "a whole number"
    if isinstance(value, float):
        return "a number"
    if isinstance(value, str):
        return "text"
    return "a list"


def _coerce_override(default: Any, value: Any) -> tuple[bool, Any]:
    """Match an override to its default's type; text from a command line is read as YAML."""
    if isinstance(value, str) and not isinstance(default, str):
        try:
            value = yaml.safe_load(value)
        except yaml.YAMLError:
            return False, value
    if isinstance(default, bool):
        return isinstance(value, bool), value
    if isinstance(default, int):
        return isinstance(value, int) and not isinstance(value, bool), value
    if isinstance(default, float):
        ok = isinstance(value, (int, float)) and not isinstance(value, bool)
        return ok, float(value) if ok else value
    if isinstance(default, str):
        return isinstance(value, str), value
    if isinstance(default, list):
        ok = isinstance(value, list) and all(_is_plain_scalar(v) for v in value)
        return ok, list(value) if ok else value
    return False, value


def _is_plain_scalar(value: Any) -> bool:
    return isinstance(value, (bool, int, float, str))


def _parameters(raw: Any, where: SourceRef, problems: list[Problem]) -> dict[str, Any]:
    if raw is None:
        return {}
    if not isinstance(raw, dict):
        problems.append(Problem(where, "'parameters' must be a mapping of names to default values",
                                "for example parameters: {frames: 32, differences: [2, 5, 10]}"))
        return {}
    out: dict[str, Any] = {}
    for name, value in raw.items():
        at = raw.ref_of(name) if isinstance(raw, MarkedDict) else where
        key_at = raw.key_ref(name) if isinstance(raw, MarkedDict) else where
        if not isinstance(name, str) or not NAME_PATTERN.match(name):
            problems.append(Problem(key_at, f"parameter name {name!r} is not a plain name",
                                    "use letters, digits and '_', starting with a letter"))
            continue
        plain = _is_plain_scalar(value) or (isinstance(value, list)
                                            and all(_is_plain_scalar(v) for v in value))
        if not plain:
            problems.append(Problem(at, f"parameter '{name}' needs a default value (a number, "
                                        f"text, true/false or a list of these)",
                                    "its type is taken from the default, so give one"))
            continue
        texts = value if isinstance(value, list) else [value]
        if any(isinstance(t, str) and "${" in t for t in texts):
            problems.append(Problem(at, f"parameter '{name}' refers to another value",
                                    "defaults are plain values; references belong in steps"))
            continue
        out[name] = list(value) if isinstance(value, list) else value
    return out


def _apply_overrides(defaults: dict[str, Any], overrides: Mapping[str, Any], raw: Any,
                     where: SourceRef, problems: list[Problem]) -> dict[str, Any]:
    used = dict(defaults)
    for name, value in overrides.items():
        if name not in defaults:
            declared = ", ".join(sorted(defaults)) or "none"
            close = suggest(name, defaults, "parameters")
            problems.append(Problem(where, f"override of '{name}': the recipe declares no such "
                                           f"parameter",
                                    f"declared parameters: {declared}"
                                    + (f"; {close}" if close.startswith("did") else "")))
            continue
        ok, coerced = _coerce_override(defaults[name], value)
        if not ok:
            at = raw.ref_of(name) if isinstance(raw, MarkedDict) else where
            problems.append(Problem(at, f"override {name}={value!r} is not "
                                        f"{_type_name(defaults[name])} like its default "
                                        f"{defaults[name]!r}",
                                    f"give {name} as {_type_name(defaults[name])}"))
            continue
        used[name] = coerced
    return used


def load_recipe(path: Path | str, overrides: Mapping[str, Any] | None = None,
                facts: StationFacts | None = None, text: str | None = None) -> Recipe:
    """Read, check and return a recipe; raise :class:`SourceError` listing every problem.

    ``overrides`` replace parameter defaults (type-checked against the default; text such as a
    command-line ``"32"`` is read as YAML first). With ``facts=None`` the station checks (targets,
    limits, axes, analyses) are skipped: a syntax-only check of the recipe.
    """
    file = str(path)
    doc = load_yaml(path, text)
    problems: list[Problem] = []
    if not isinstance(doc, MarkedDict):
        raise SourceError([Problem(doc.ref(), "the top level of a recipe must be a mapping",
                                   "start with 'recipe: <name>' and list the work under 'steps:'")])
    for key in doc:
        if key not in TOP_LEVEL_KEYS:
            problems.append(Problem(doc.key_ref(key), f"unknown top-level key '{key}'",
                                    suggest(key, TOP_LEVEL_KEYS, "top-level keys")))
    name = doc.get("recipe", Path(file).stem)
    if not isinstance(name, str) or not name.strip():
        problems.append(Problem(doc.ref_of("recipe"), "'recipe' must be the recipe's name as text",
                                "for example recipe: distortion-grid"))
        name = Path(file).stem
    description = doc.get("description", "")
    if description is None or isinstance(description, (dict, list)):
        problems.append(Problem(doc.ref_of("description"), "'description' must be text",
                                "write one line saying what the recipe is for"))
        description = ""
    params_raw = doc.get("parameters")
    params_where = doc.ref_of("parameters") if "parameters" in doc else doc.ref()
    defaults = _parameters(params_raw, params_where, problems)
    used = _apply_overrides(defaults, dict(overrides or {}), params_raw, params_where, problems)
    if "steps" not in doc:
        problems.append(Problem(doc.ref(), "the recipe is missing 'steps'",
                                "add 'steps:' with a list of steps, for example "
                                "'- note: hello'"))
        raise SourceError(problems)
    steps_raw = doc["steps"]
    if isinstance(steps_raw, MarkedList) and not steps_raw:
        problems.append(Problem(doc.ref_of("steps"), "the recipe has no steps",
                                "list at least one step under 'steps:'"))
    nodes = parse_steps(steps_raw, doc.ref_of("steps"), problems)
    expansion = expand_nodes(nodes, used, facts)
    problems.extend(expansion.problems)
    if problems:
        raise SourceError(problems)
    name = name.strip()
    description = str(description).strip()
    return Recipe(name=name, description=description, file=file, parameters=used,
                  defaults=defaults, steps=nodes,
                  plan=build_plan(name, description, file, used, expansion), facts=facts,
                  overrides=dict(overrides or {}))
