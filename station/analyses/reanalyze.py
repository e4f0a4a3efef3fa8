"""Re-run an analysis after the fact: on a finished run folder, or distortion on one frame.

Why: the analysis improves after a run (a better fit, a corrected target file) and frames arrive
from other labs. Re-analysis uses the copies of the station, UUT and recipe files kept in the run
folder's inputs/, so the answer does not drift when the originals are edited later; it never
touches an instrument. It runs the registered analysis (station.analyses.registry), the same code
a live run takes, over a site whose captures are the run's and whose results go to a new version
(RUN/reanalysis/<n>/results and plots) so the run's own results stay as they were recorded;
``replace`` writes over them instead (the run's manifest is not rewritten, so `verify` then
reports those files as altered: the record shows the run was re-analysed in place), ``out``
writes to a folder outside any run folder.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

from analysis.verdicts import Verdict
from sequences.plan import expand
from sequences.plansteps import AnalyzeStep, OptionValue
from sequences.recipe import load_recipe
from station.analyses.builtin import builtin_registry
from station.analyses.plan_check import recipe_facts
from station.analyses.registry import AnalysisContext, AnalysisFailed, JsonValue, Registry
from station.analyses.site import FolderSite
from station.inputs.config import StationConfig, load_station
from station.analyses.frame_file import analyze_frame_file, read_frame
from station.record.runfolder import (RunFolder, RunFolderError, is_run_folder,
                                      refuse_inside_run_folder, refuse_unfinished_run)
from station.inputs.uut_file import load_uut

__all__ = ["Reanalysis", "analyze_run_folder", "analyze_frame_file", "read_frame",
           "REANALYSIS_DIR"]

REANALYSIS_DIR = "reanalysis"

_SHORT_KEYS = ("max_distortion_percent", "classification", "boresight_offset_px", "skew_deg",
               "n_defects", "defect_labels")


@dataclass
class Reanalysis:
    """What a re-analysis wrote and found: per analyze step its summary, all verdicts, where."""

    analysis: str
    results_dir: Path
    plots_dir: Path
    summaries: dict[str, dict[str, JsonValue]] = field(default_factory=dict)
    verdicts: list[Verdict] = field(default_factory=list)
    files: list[Path] = field(default_factory=list)

    @property
    def summary(self) -> dict[str, JsonValue]:
        """The one step's summary (several steps: one summary per step id)."""
        if len(self.summaries) == 1:
            return next(iter(self.summaries.values()))
        return dict(self.summaries)  # type: ignore[arg-type]


def _manifest_overrides(run_path: Path) -> dict[str, OptionValue]:
    try:
        data = json.loads((run_path / "manifest.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    plan = data.get("plan") if isinstance(data, dict) else None
    overrides = plan.get("overrides") if isinstance(plan, dict) else None
    return dict(overrides) if isinstance(overrides, dict) else {}


def _input_copy(run: RunFolder, role: str) -> Path:
    try:
        return run.input_path(role)
    except RunFolderError as exc:
        raise ValueError(f"{exc}; this run cannot be re-analysed without its {role} file") \
            from None


def _load_station_copy(run: RunFolder) -> StationConfig:
    """The station copy; if it names files beside the original (a measured grid), use those."""
    copy = _input_copy(run, "station")
    try:
        return load_station(copy)
    except ValueError:
        source = Path(str(run.inputs.get("station", {}).get("source", "")))
        if source.is_file():
            return load_station(source)
        raise


def _inside_a_run_folder(path: Path) -> Path | None:
    for folder in (path, *path.parents):
        if is_run_folder(folder):
            return folder
    return None


def _next_version(run: RunFolder) -> Path:
    root = run.path / REANALYSIS_DIR
    n = 1
    while (root / str(n)).exists():
        n += 1
    return root / str(n)


def _destination(run: RunFolder, out: Path | None, replace: bool) -> tuple[Path, Path]:
    if replace and out is not None:
        raise ValueError("give either --out or --replace, not both")
    if replace:
        return run.results_dir, run.plots_dir
    if out is not None:
        out = Path(out).resolve()
        owner = _inside_a_run_folder(out)
        if owner is not None:
            raise ValueError(f"{out} is inside the run folder {owner}; a run folder is evidence "
                             "and only nightbench writes into it. Leave out --out (results go "
                             "to a new RUN/reanalysis/<n>/), or give a folder outside any run")
        return out, out / "plots"
    version = _next_version(run)
    return version / "results", version / "plots"


def analyze_run_folder(path: str | Path, analysis: str = "distortion",
                       out: str | Path | None = None, replace: bool = False,
                       registry: Registry | None = None) -> Reanalysis:
    """Re-run every `analyze` step of ``analysis`` in a finished run.

    Results go to a new version ``RUN/reanalysis/<n>/`` unless ``replace`` (the run's own
    results/ and plots/) or ``out`` (a folder outside any run folder). Raises ValueError (file
    and what to do) if the folder, its inputs or its captures are unusable.
    """
    registry = registry or builtin_registry()
    if analysis not in registry:
        raise ValueError(f"no analysis named {analysis!r}; known: {', '.join(sorted(registry))}")
    try:
        run = RunFolder.open(path)
        refuse_unfinished_run(run.path)
        if out is not None:
            refuse_inside_run_folder(out)
    except RunFolderError as exc:
        raise ValueError(str(exc)) from None
    station = _load_station_copy(run)
    uut = load_uut(_input_copy(run, "uut"))
    recipe = load_recipe(_input_copy(run, "recipe"), overrides=_manifest_overrides(run.path),
                         facts=recipe_facts(station, registry))
    steps = [s for s in expand(recipe).steps
             if isinstance(s, AnalyzeStep) and s.analysis == analysis]
    if not steps:
        raise ValueError(f"{run.path}: its recipe has no {analysis} analysis step; nothing to "
                         f"re-analyse")
    results_dir, plots_dir = _destination(run, Path(out) if out is not None else None, replace)
    report = Reanalysis(analysis, results_dir, plots_dir)
    context = AnalysisContext(station, uut, _run_date(run))
    for step in steps:
        sub = "" if len(steps) == 1 else step.id
        site = FolderSite(run.path, results_dir / sub if sub else results_dir,
                          plots_dir / sub if sub else plots_dir, run_id=run.path.name)
        try:
            outcome = registry[analysis].run(site, step, context)
        except (AnalysisFailed, KeyError, OSError) as exc:
            raise ValueError(f"{run.path}: step {step.id} ({step.source}) could not be "
                             f"re-analysed: {exc}") from None
        report.summaries[step.id] = dict(outcome.summary)
        report.verdicts.extend(outcome.verdicts)
        report.files.extend(site.written)
    return report


def _run_date(run: RunFolder) -> str:
    try:
        info = json.loads((run.path / "run-folder.json").read_text(encoding="utf-8"))
        return str(info.get("created_utc", ""))[:10]
    except (OSError, ValueError):
        return ""
