"""Every verdict of a finished run, whichever results file holds it.

A run writes its verdicts as :meth:`analysis.verdicts.Verdict.to_dict` entries, either gathered in
``results/verdicts.json`` (``{"uut": ..., "verdicts": [...], "outcome": ...}``) or as a
``verdicts`` list inside each analysis's results file. Older results files carry a ``verdicts``
list of ``{name, value, limit, passed}`` entries, or only a ``passed`` flag beside the figure the
UUT file limits (netd.json); those are read too, with no uncertainty, so no run is left unjudged
in the report or the history.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from analysis.verdicts import FAIL, MARGINAL, PASS, overall, verdict_from_dict

VERDICTS_FILE = "verdicts.json"


@dataclass(frozen=True)
class VerdictRow:
    """One judged spec limit as the report and the history show it (sigma None: not stated)."""

    key: str
    quantity: str
    value: float | None
    sigma: float | None
    unit: str
    limit: float | None
    sense: str
    margin: float | None
    status: str
    analysis: str
    conditions: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class RunVerdicts:
    rows: tuple[VerdictRow, ...]
    outcome: str
    source: str


def _num(x: Any) -> float | None:
    try:
        f = float(x)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def _from_verdict_dict(d: Mapping[str, Any], analysis: str) -> VerdictRow:
    v = verdict_from_dict(d)
    return VerdictRow(v.key, v.quantity, _num(v.value), _num(v.sigma), v.unit, _num(v.limit),
                      v.sense, _num(v.margin), v.status, analysis, dict(v.conditions))


def _sense_of(key: str) -> str:
    return "min" if key.startswith("min_") else "max"


def _from_legacy(d: Mapping[str, Any], analysis: str) -> VerdictRow:
    """{name, value, limit, passed}: a limit on the magnitude, no uncertainty stated."""
    key = str(d.get("name") or d.get("key"))
    value, limit = _num(d.get("value")), _num(d.get("limit"))
    sense = _sense_of(key)
    margin = None
    if value is not None and limit is not None:
        magnitude = abs(value) if key.startswith("max_") else value
        margin = limit - magnitude if sense == "max" else magnitude - limit
    status = PASS if d.get("passed") else FAIL
    return VerdictRow(key, key.replace("_", " "), value, None, unit_of(key), limit, sense, margin,
                      status, analysis)


def _from_passed_flag(data: Mapping[str, Any], analysis: str,
                      limits: Mapping[str, Any]) -> list[VerdictRow]:
    """A results file with only `passed`: judge the figure the UUT file limits under the same
    name (netd.json: netd_mk against spec_limits.netd_mk)."""
    rows = []
    for key, limit in limits.items():
        value = _num(data.get(key))
        if value is None or _num(limit) is None:
            continue
        sense = _sense_of(key)
        margin = float(limit) - value if sense == "max" else value - float(limit)
        rows.append(VerdictRow(key, key.replace("_", " "), value, None, unit_of(key),
                               float(limit), sense, margin, PASS if data["passed"] else FAIL,
                               analysis))
    return rows


UNIT_SUFFIXES = (("_counts_per_k", "counts/K"), ("_percent", "%"), ("_mk", "mK"), ("_k", "K"),
                 ("_px", "px"), ("_deg", "deg"), ("_mm", "mm"), ("_mrad", "mrad"),
                 ("_hz", "Hz"), ("_counts", "counts"), ("_c", "C"), ("_s", "s"))


def unit_of(name: str) -> str:
    """The unit a figure's name ends with (the project names figures like netd_mk, roll_deg)."""
    for suffix, unit in UNIT_SUFFIXES:
        if name.endswith(suffix):
            return unit
    return ""


def _rows_of_file(data: Any, analysis: str, limits: Mapping[str, Any]) -> list[VerdictRow]:
    if not isinstance(data, Mapping):
        return []
    listed = data.get("verdicts")
    if isinstance(listed, list):
        return [_from_verdict_dict(d, analysis) if "status" in d else _from_legacy(d, analysis)
                for d in listed if isinstance(d, Mapping)]
    if isinstance(data.get("passed"), bool):
        return _from_passed_flag(data, analysis, limits)
    return []


def read_verdicts(results_dir: Path, limits: Mapping[str, Any] | None = None) -> RunVerdicts:
    """The run's verdicts: results/verdicts.json when the run wrote it, else gathered from every
    results file. ``limits`` are the UUT file's spec limits (for files with only `passed`)."""
    gathered = results_dir / VERDICTS_FILE
    if gathered.is_file():
        data = json.loads(gathered.read_text(encoding="utf-8"))
        rows = tuple(_from_verdict_dict(d, str(d.get("analysis", "")))
                     for d in data.get("verdicts", []))
        outcome = str(data.get("outcome") or _outcome(rows))
        return RunVerdicts(rows, outcome, f"results/{VERDICTS_FILE}")
    rows: list[VerdictRow] = []
    for path in sorted(results_dir.glob("*.json")) if results_dir.is_dir() else []:
        try:
            data = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue
        rows += _rows_of_file(data, path.stem, limits or {})
    return RunVerdicts(tuple(rows), _outcome(rows), "results/*.json")


def _outcome(rows: tuple[VerdictRow, ...] | list[VerdictRow]) -> str:
    """The overall outcome by analysis.verdicts.overall's rule (a MARGINAL does not fail)."""
    class _S:  # overall() only reads .status
        def __init__(self, status: str) -> None:
            self.status = status
    return overall([_S(r.status) for r in rows])  # type: ignore[arg-type]


def count_by_status(rows: tuple[VerdictRow, ...]) -> dict[str, int]:
    return {s: sum(1 for r in rows if r.status == s) for s in (PASS, MARGINAL, FAIL)}
