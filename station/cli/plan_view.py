"""The plan as `check` prints it: loops folded (one line per step of a loop body, with its count,
the range of its values and its total estimate), or every step with `--full`.

Why plain text: an overnight plan has over a thousand steps; laying them out as a table costs
seconds and a screenful nobody reads. The folded view fits a screen; the full list is plain
aligned columns that `grep` and `less` handle.

Folding: a step id's loop iteration numbers (`s3.sweep[2].s1.blackbody`) are replaced by the
range over the plan (`s3.sweep[1..5].s1.blackbody`); steps with the same folded id are one line.
A parameter the same in every instance is shown once, one that varies as `lowest..highest` (or
the number of distinct values when it is not a number).
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from station.formatting import columns_text, format_duration, format_params

_INDEX = re.compile(r"\[(\d+)\]")


@dataclass
class FoldedStep:
    """The steps of a plan that share one folded id."""

    pattern: str
    kind: str
    numbers: list[int] = field(default_factory=list)          # 1-based places in the plan
    indices: list[list[int]] = field(default_factory=list)     # loop iteration numbers
    params: list[Mapping[str, Any]] = field(default_factory=list)
    estimate_s: float = 0.0

    @property
    def folded_id(self) -> str:
        if not self.indices or not self.indices[0]:
            return self.pattern
        columns = list(zip(*self.indices))
        parts = iter(f"[{min(c)}..{max(c)}]" if min(c) != max(c) else f"[{c[0]}]"
                     for c in columns)
        return re.sub(r"\[\*\]", lambda _m: next(parts), self.pattern)

    def steps_text(self) -> str:
        """`7`, `4..12` (every step between), or `4,6,..12` (every other one, as loop bodies)."""
        first, last = self.numbers[0], self.numbers[-1]
        if first == last:
            return str(first)
        if last - first + 1 == len(self.numbers):
            return f"{first}..{last}"
        return f"{first},{self.numbers[1]},..{last}"


def fold(steps: Sequence[Any], per_step: Mapping[str, float]) -> list[FoldedStep]:
    """Group the plan's steps by folded id, in order of first appearance."""
    groups: dict[str, FoldedStep] = {}
    for number, step in enumerate(steps, start=1):
        pattern = _INDEX.sub("[*]", step.id)
        group = groups.get(pattern)
        if group is None:
            group = groups[pattern] = FoldedStep(pattern, step.kind)
        group.numbers.append(number)
        group.indices.append([int(i) for i in _INDEX.findall(step.id)])
        group.params.append(step.parameters())
        group.estimate_s += float(per_step.get(step.id, 0.0))
    return list(groups.values())


def _flatten(params: Mapping[str, Any], prefix: str = "") -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, value in params.items():
        if key == "captures_resolved":
            continue
        if isinstance(value, Mapping):
            out.update(_flatten(value, f"{prefix}{key}."))
        else:
            out[f"{prefix}{key}"] = value
    return out


def varying_params(params: Sequence[Mapping[str, Any]]) -> str:
    """`mode difference; value 5..25; hold 10`: constants once, ranges for what varies."""
    flat = [_flatten(p) for p in params]
    keys: list[str] = []
    for p in flat:
        keys += [k for k in p if k not in keys]
    parts = []
    for key in keys:
        values = [p.get(key) for p in flat]
        distinct = {repr(v) for v in values}
        if len(distinct) == 1:
            parts.append(format_params({key: values[0]}))
        elif all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values):
            parts.append(f"{key} {min(values):g}..{max(values):g}")
        else:
            parts.append(f"{key} {len(distinct)} values")
    return "; ".join(parts)


def _clip(text: str, width: int = 90) -> str:
    return text if len(text) <= width else text[: width - 3] + "..."


def folded_text(steps: Sequence[Any], per_step: Mapping[str, float]) -> str:
    """The condensed plan as plain aligned columns."""
    rows = [(g.steps_text(), g.folded_id, g.kind, len(g.numbers), format_duration(g.estimate_s),
             _clip(varying_params(g.params))) for g in fold(steps, per_step)]
    return columns_text(["steps", "step", "kind", "count", "estimate", "parameters"], rows)


def full_text(steps: Sequence[Any], per_step: Mapping[str, float]) -> str:
    """Every step of the plan, one line each."""
    rows = [(n, s.id, s.kind, f"{float(per_step.get(s.id, 0.0)):.1f}",
             _clip(format_params(s.parameters())))
            for n, s in enumerate(steps, start=1)]
    return columns_text(["#", "step id", "kind", "est. s", "parameters"], rows)
