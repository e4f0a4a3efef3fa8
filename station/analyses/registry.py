"""The analyses a recipe can name, each declared once, in one place.

Why a registry: an `analyze` step is checked at `nightbench check` (its options, the captures and
targets it needs, the spec keys it evaluates), run by the sequencer, and re-run later by
`nightbench analyze NAME RUN_FOLDER`. All three read the same declaration, so a new analysis
(MTF, boresight, noise, field of view ...) is one module with one `Analysis`, added to the
built-in list in station/analyses/builtin.py, and no change to the sequencer.

An analysis runs over a *site* (:class:`AnalysisSite`): where its captures are read and its
results written. A run folder during a run and a re-analysis output folder both implement it
(station/analyses/site.py), and neither lets a result be written outside its own results and
plots folders. No option may name a folder: results always go to the site.

>>> opt = OptionSpec("mode", "choice", "grid", "grid or scan", choices=("grid", "scan"))
>>> opt.coerce("scan")
('scan', None)
>>> opt.coerce("scna")[1].hint
"did you mean 'scan'?"
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal, Protocol, TypeVar, Union

import numpy as np

from analysis.uut import UutSpec
from analysis.verdicts import SpecKey, Verdict
from sequences.plansteps import AnalyzeStep, CaptureStep, OptionValue, PlanStep
from sequences.yamlsource import Problem, SourceRef
from station.inputs.config import StationConfig

T = TypeVar("T")

__all__ = ["OptionSpec", "OptionIssue", "CaptureNeed", "AnalysisSite", "AnalysisContext",
           "AnalysisOutcome", "Analysis", "AnalysisFailed", "Registry", "JsonValue",
           "FOLDER_WORDS"]

OptionKind = Literal["choice", "number", "count", "flag", "text"]

JsonValue = Union[None, bool, int, float, str, Sequence["JsonValue"], Mapping[str, "JsonValue"]]
"""What a summary or a results file holds."""

FOLDER_WORDS = ("dir", "folder", "path", "out", "output", "file")
"""Parts of an option name that mean a place on disk: never an option (results go to the site)."""


class AnalysisFailed(Exception):
    """The analysis cannot give a result from these captures; the message says why and what to
    do. The run faults on it like on a failed step (the frames already taken are kept)."""


@dataclass(frozen=True)
class OptionIssue:
    message: str
    hint: str = ""


@dataclass(frozen=True)
class OptionSpec:
    """One option of an analysis, as a recipe writes it under `options:`."""

    name: str
    kind: OptionKind
    default: OptionValue
    help: str
    choices: tuple[str, ...] = ()
    minimum: float | None = None

    def coerce(self, value: object) -> tuple[OptionValue | None, OptionIssue | None]:
        """The value in its canonical type, or why it is not acceptable."""
        what = f"option '{self.name}'"
        if self.kind == "choice":
            if value in self.choices:
                return str(value), None
            close = difflib.get_close_matches(str(value), self.choices, n=1, cutoff=0.6)
            hint = (f"did you mean '{close[0]}'?" if close
                    else f"choose one of {', '.join(self.choices)}")
            return None, OptionIssue(f"{what} must be one of {', '.join(self.choices)}, not "
                                     f"{value!r}", hint)
        if self.kind == "flag":
            if isinstance(value, bool):
                return value, None
            return None, OptionIssue(f"{what} must be true or false, not {value!r}",
                                     "write true or false")
        if self.kind in ("number", "count"):
            whole = self.kind == "count"
            ok = (isinstance(value, int) if whole else isinstance(value, (int, float)))
            if isinstance(value, bool) or not ok or not math.isfinite(float(value)):  # type: ignore[arg-type]
                kind = "a whole number" if whole else "a number"
                return None, OptionIssue(f"{what} must be {kind}, not {value!r}",
                                         f"write {kind}")
            number = int(value) if whole else float(value)  # type: ignore[arg-type]
            if self.minimum is not None and number < self.minimum:
                return None, OptionIssue(f"{what} must be at least {self.minimum:g}, not "
                                         f"{number:g}", f"use {self.minimum:g} or more")
            return number, None
        if isinstance(value, (str, int, float)) and not isinstance(value, bool):
            return str(value), None
        return None, OptionIssue(f"{what} must be text, not {value!r}", "write a single word")


@dataclass(frozen=True)
class CaptureNeed:
    """What an analysis needs of the captures it is given (checked against the plan).

    ``targets``: target kinds accepted in the beam (``pinhole_grid``, ``single_pinhole``,
    ``slanted_edge``, ``open_aperture``, ``blank``); empty means any. ``keep``: a capture must
    keep one of these (``stack`` for temporal noise, ``average`` for a mean frame; ``both``
    satisfies either); ``first_keep`` applies to the first capture only (NETD reads one stack).
    ``angular_axes``: the captures must be taken at stage poses with azimuth and elevation axes
    in angular units (scans). ``why`` says what the analysis does with them, for the messages.
    """

    targets: frozenset[str] = frozenset()
    keep: frozenset[str] = frozenset({"average", "stack", "both"})
    first_keep: frozenset[str] = frozenset({"average", "stack", "both"})
    min_captures: int = 1
    angular_axes: bool = False
    why: str = ""


class AnalysisSite(Protocol):
    """Where an analysis reads its captures and writes its results (a run folder, or a
    standalone re-analysis folder)."""

    @property
    def results_dir(self) -> Path: ...

    @property
    def plots_dir(self) -> Path: ...

    @property
    def run_id(self) -> str: ...

    def capture_info(self, name: str) -> Mapping[str, JsonValue]:
        """The capture's recorded metadata `extra` (target, readings at start and end ...)."""
        ...

    def load_average(self, name: str) -> np.ndarray: ...

    def load_stack(self, name: str) -> np.ndarray: ...

    def remembered(self, what: str, captures: Sequence[str], compute: Callable[[], T]) -> T:
        """`compute()` once for the same captures (as long as their files are unchanged)."""
        ...

    def result_path(self, file_name: str) -> Path:
        """A path inside results_dir for `file_name` (a plain name; anything else refused)."""
        ...

    def plot_path(self, file_name: str) -> Path: ...

    def register(self, path: Path) -> None:
        """Record a written file (checksummed into the manifest of a run)."""
        ...


@dataclass(frozen=True)
class AnalysisContext:
    """What an analysis may know besides its captures: the station (collimator, targets) and the
    UUT (nominal geometry, spec limits and their conditions), and when the run was made."""

    station: StationConfig
    uut: UutSpec
    date_utc: str = ""


@dataclass(frozen=True)
class AnalysisOutcome:
    """What an analysis gives back: a short summary for the journal and the console, the
    verdicts against the UUT's spec limits, and the files it wrote."""

    summary: Mapping[str, JsonValue]
    verdicts: tuple[Verdict, ...] = ()
    files: tuple[Path, ...] = ()


RunFunction = Callable[[AnalysisSite, AnalyzeStep, AnalysisContext], AnalysisOutcome]
ConditionsOf = Callable[[AnalyzeStep, Sequence[PlanStep]], Mapping[str, float]]


def _no_need(options: Mapping[str, OptionValue]) -> CaptureNeed:
    return CaptureNeed()


def _no_conditions(step: AnalyzeStep, steps: Sequence[PlanStep]) -> Mapping[str, float]:
    return {}


@dataclass(frozen=True)
class Analysis:
    """One analysis, declared once.

    ``run(site, step, context)`` does the work: ``step`` is the typed analyze step of the plan
    (its ``instances`` are the capture names to use, its ``options`` are validated with
    :meth:`options_of`). ``needs(options)`` says what the captures must be for these options (a
    grid and a scan need different targets). ``spec_keys`` are the UUT spec keys it judges;
    ``planned_conditions(step, steps)`` says, from the plan alone, at which conditions it will
    measure (compared at check time with the conditions the UUT file states).
    """

    name: str
    description: str
    run: RunFunction
    options: Mapping[str, OptionSpec] = field(default_factory=dict)
    needs: Callable[[Mapping[str, OptionValue]], CaptureNeed] = _no_need
    spec_keys: Mapping[str, SpecKey] = field(default_factory=dict)
    result_files: tuple[str, ...] = ()
    planned_conditions: ConditionsOf = _no_conditions

    def check_options(self, step: AnalyzeStep) -> tuple[dict[str, OptionValue], list[Problem]]:
        """The step's options with defaults filled in, and every problem with its place."""
        problems: list[Problem] = []
        values: dict[str, OptionValue] = {}
        for key, raw in step.options.items():
            where = step.option_ref(key)
            spec = self.options.get(key)
            if spec is None:
                if any(word in key.lower().split("_") for word in FOLDER_WORDS) or (
                        isinstance(raw, str) and ("/" in raw or "\\" in raw)):
                    problems.append(Problem(where, f"option '{key}' of {self.name} names a place "
                                            "on disk; analyses take no folders or files",
                                            "results always go to the run folder's results/ "
                                            "and plots/; use 'nightbench analyze' with --out to "
                                            "write elsewhere"))
                    continue
                known = ", ".join(sorted(self.options)) or "none"
                close = difflib.get_close_matches(key, sorted(self.options), n=1, cutoff=0.6)
                hint = f"did you mean '{close[0]}'?" if close else f"options of {self.name}: {known}"
                problems.append(Problem(where, f"unknown option '{key}' for analysis "
                                        f"{self.name}", hint))
                continue
            value, issue = spec.coerce(raw)
            if issue is not None:
                problems.append(Problem(where, f"{self.name}: {issue.message}", issue.hint))
            else:
                values[key] = value  # type: ignore[assignment]
        for name, spec in self.options.items():
            values.setdefault(name, spec.default)
        return values, problems

    def options_of(self, step: AnalyzeStep) -> dict[str, OptionValue]:
        """Validated options of a step already checked (AnalysisFailed if they are not valid)."""
        values, problems = self.check_options(step)
        if problems:
            raise AnalysisFailed("; ".join(str(p) for p in problems))
        return values


class TargetKinds(Protocol):
    """What a plan check needs to know of the station's wheel: the kind of each named target."""

    def __call__(self, name: str) -> str | None: ...


class Registry(Mapping[str, Analysis]):
    """The analyses a station knows, by name, and the plan checks they declare."""

    def __init__(self, analyses: Sequence[Analysis]) -> None:
        self._by_name = {a.name: a for a in analyses}

    def __getitem__(self, name: str) -> Analysis:
        return self._by_name[name]

    def __iter__(self) -> Iterator[str]:
        return iter(self._by_name)

    def __len__(self) -> int:
        return len(self._by_name)

    @property
    def names(self) -> frozenset[str]:
        return frozenset(self._by_name)

    def plan_problems(self, steps: Sequence[PlanStep], target_kind: TargetKinds,
                      axis_units: Mapping[str, str]) -> list[Problem]:
        """Every analyze step's options and needs, checked against the plan's captures."""
        captures = {s.name: s for s in steps if isinstance(s, CaptureStep)}
        problems: list[Problem] = []
        for step in steps:
            if not isinstance(step, AnalyzeStep) or step.analysis not in self._by_name:
                continue
            analysis = self._by_name[step.analysis]
            options, found = analysis.check_options(step)  # bad options: their defaults
            problems.extend(found)
            need = analysis.needs(options)
            given = [captures[n] for n in step.instances if n in captures]
            problems.extend(_need_problems(analysis, step, need, given, target_kind,
                                           axis_units))
        return problems


def _need_problems(analysis: Analysis, step: AnalyzeStep, need: CaptureNeed,
                   given: Sequence[CaptureStep], target_kind: TargetKinds,
                   axis_units: Mapping[str, str]) -> list[Problem]:
    where = step.captures_source
    what = f"{analysis.name}{' (' + need.why + ')' if need.why else ''}"
    found: list[Problem] = []
    if len(given) < need.min_captures:
        found.append(Problem(where, f"{what} needs at least {need.min_captures} captures, the "
                                    f"step gives {len(given)}",
                             "name more captures, or a capture made inside a sweep or scan"))
    if need.targets:
        accepted = ", ".join(sorted(need.targets))
        for cap in given:
            kind = target_kind(cap.target) if cap.target is not None else None
            if kind not in need.targets:
                shown = (f"'{cap.target}' ({kind})" if cap.target is not None
                         else "no target chosen before it")
                found.append(Problem(where, f"{what} needs a {accepted} target in the beam; "
                                            f"capture '{cap.name}' (line {cap.source.line}) has "
                                            f"{shown}",
                                     "put a 'target:' step naming such a target before the "
                                     "capture, or choose the analysis mode that fits it"))
                break
    for index, cap in enumerate(given):
        keeps = need.first_keep if index == 0 else need.keep
        if cap.keep not in keeps and cap.keep != "both":
            found.append(Problem(where, f"{what} needs capture '{cap.name}' (line "
                                        f"{cap.source.line}) kept as "
                                        f"{' or '.join(sorted(keeps))}, it keeps {cap.keep}",
                                 "write keep: both on that capture"))
            break
    if need.angular_axes:
        from station.inputs.limits import ANGULAR_UNITS

        angular = {a for a, unit in axis_units.items() if unit in ANGULAR_UNITS}
        for cap in given:
            moved = {a for a in cap.pose if a in angular}
            if not {"az", "el"} <= moved:
                have = ", ".join(f"{a} ({axis_units.get(a, '?')})" for a in cap.pose) or "none"
                found.append(Problem(where, f"{what} needs each capture taken at a stage pose "
                                            f"with angular axes az and el; capture '{cap.name}' "
                                            f"(line {cap.source.line}) is at axes: {have}",
                                     "capture inside a 'scan' over az and el on a gimbal whose "
                                     "axes are in degrees"))
                break
    return found
