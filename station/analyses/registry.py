"""The analyses a recipe can name, each declared once, in one place.

Why a registry: an `analyze` step is checked at `nightbench check` (its options, the captures and
targets it needs, the spec keys it evaluates), run by the sequencer, and re-run later by
`nightbench analyze NAME RUN_FOLDER`. All three read the same declaration, so a new analysis
(MTF, boresight, noise, field of view ...) is one module with one `Analysis` and no change to the
sequencer.

An analysis runs over a *site* (:class:`AnalysisSite`): where its captures are read and its
results written. A run folder during a run and a re-analysis output folder both implement it, and
neither lets a result be written outside its own results and plots folders.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal, Protocol

import numpy as np

from analysis.verdicts import SpecKey, Verdict

__all__ = ["OptionSpec", "CaptureNeed", "AnalysisSite", "AnalysisOutcome", "Analysis",
           "AnalysisFailed"]

OptionKind = Literal["choice", "number", "count", "flag", "text"]


class AnalysisFailed(Exception):
    """The analysis cannot give a result from these captures; the message says why and what to
    do. The run faults on it like on a failed step (the frames already taken are kept)."""


@dataclass(frozen=True)
class OptionSpec:
    """One option of an analysis, as a recipe writes it under `options:`."""

    name: str
    kind: OptionKind
    default: Any
    help: str
    choices: tuple[str, ...] = ()
    minimum: float | None = None


@dataclass(frozen=True)
class CaptureNeed:
    """What an analysis needs of the captures it is given (checked against the plan).

    ``targets``: target kinds accepted in the beam (``pinhole_grid``, ``single_pinhole``,
    ``slanted_edge``, ``open_aperture``); empty means any. ``keep``: a capture must keep one of
    these (``stack`` for temporal noise, ``average`` for a mean frame; ``both`` satisfies
    either). ``angular_axes``: the captures must be taken at stage poses with azimuth and
    elevation axes (scans).
    """

    targets: frozenset[str] = frozenset()
    keep: frozenset[str] = frozenset({"average", "stack", "both"})
    min_captures: int = 1
    angular_axes: bool = False


class AnalysisSite(Protocol):
    """Where an analysis reads its captures and writes its results (a run folder, or a
    standalone re-analysis folder)."""

    @property
    def results_dir(self) -> Path: ...

    @property
    def plots_dir(self) -> Path: ...

    @property
    def run_id(self) -> str: ...

    def capture_info(self, name: str) -> Mapping[str, Any]:
        """The capture's recorded metadata `extra` (target, readings at start and end ...)."""
        ...

    def load_average(self, name: str) -> np.ndarray: ...

    def load_stack(self, name: str) -> np.ndarray: ...

    def result_path(self, file_name: str) -> Path:
        """A path inside results_dir for `file_name` (a plain name; anything else refused)."""
        ...

    def plot_path(self, file_name: str) -> Path: ...

    def register(self, path: Path) -> None:
        """Record a written file (checksummed into the manifest of a run)."""
        ...


@dataclass(frozen=True)
class AnalysisOutcome:
    """What an analysis gives back: a short summary for the journal and the console, the
    verdicts against the UUT's spec limits, and the files it wrote."""

    summary: Mapping[str, Any]
    verdicts: tuple[Verdict, ...] = ()
    files: tuple[Path, ...] = ()


@dataclass(frozen=True)
class Analysis:
    """One analysis, declared once.

    ``run(site, step, context)`` does the work: ``step`` is the typed analyze step of the plan
    (its ``instances`` are the capture names to use, its ``options`` already validated against
    ``options``), ``context`` gives the station and UUT descriptions. ``needs(options)`` says
    what the captures must be for these options (a grid and a scan need different targets).
    """

    name: str
    description: str
    run: Callable[..., AnalysisOutcome]
    options: Mapping[str, OptionSpec] = field(default_factory=dict)
    needs: Callable[[Mapping[str, Any]], CaptureNeed] = lambda options: CaptureNeed()
    spec_keys: Mapping[str, SpecKey] = field(default_factory=dict)
    result_files: tuple[str, ...] = ()
