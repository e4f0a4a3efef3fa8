"""results/verdicts.json: every verdict of a run in one file, with the unit's overall outcome.

Why one file: the report and the history read the outcome of a run from one place, whatever
analyses it ran. Written at the end of every run (a resumed run included: the verdicts of steps
done before the interruption are read back from the journal).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from pathlib import Path

from analysis.uut import UutSpec
from analysis.verdicts import FAIL, MARGINAL, Verdict, count_failed, overall, verdict_from_dict
from station.record.atomic import write_json_atomic

__all__ = ["VERDICTS_NAME", "write_verdicts", "verdicts_from_journal", "outcome_line"]

VERDICTS_NAME = "verdicts.json"


def outcome_line(verdicts: Iterable[Verdict]) -> str:
    """UUT PASSED / UUT FAILED (n of m) / NOT JUDGED, with the marginal count when any."""
    items = list(verdicts)
    result = overall(items)
    marginal = sum(1 for v in items if v.status == MARGINAL)
    note = f"; {marginal} marginal" if marginal else ""
    if result == "NOT JUDGED":
        return "NOT JUDGED: no spec limit of the UUT file was judged by this run"
    if result == "FAILED":
        return f"UUT FAILED ({count_failed(items)} of {len(items)}{note})"
    return f"UUT PASSED ({len(items)} of {len(items)} within limits{note})"


def verdicts_from_journal(completed: Mapping[str, Mapping[str, object]]) -> list[Verdict]:
    """The verdicts recorded by the analyze steps of a journal (in the order they finished)."""
    out: list[Verdict] = []
    for record in completed.values():
        data = record.get("data")
        if record.get("kind") != "analyze" or not isinstance(data, Mapping):
            continue
        for item in data.get("verdicts") or ():  # type: ignore[union-attr]
            if isinstance(item, Mapping):
                out.append(verdict_from_dict(item))
    return out


def write_verdicts(results_dir: Path, uut: UutSpec, verdicts: Iterable[Verdict]) -> Path:
    """Write results/verdicts.json and return its path."""
    items = list(verdicts)
    data = {"uut": {"model": uut.model, "serial": uut.serial},
            "outcome": overall(items), "failed": count_failed(items),
            "marginal": sum(1 for v in items if v.status == MARGINAL), "judged": len(items),
            "summary": outcome_line(items), "verdicts": [v.to_dict() for v in items]}
    return write_json_atomic(Path(results_dir) / VERDICTS_NAME, data)


def any_failed(verdicts: Iterable[Verdict]) -> bool:
    return any(v.status == FAIL for v in verdicts)
