"""Read a finished run folder into one record: identity, outcome, verdicts, figures, provenance.

Reads only files (manifest.json, inputs/, results/*.json, plots/*.png and *.svg): the report and the history
both start from here, long after the run, on any machine that has the folder.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import math
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from station.report.verdict_rows import RunVerdicts, read_verdicts, unit_of

PENDING_NAME = "history-pending.json"
"""Left in a run folder whose history record failed; `nightbench index` records it and removes it."""
_YAML_LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)  # the C loader when built: faster
PLOT_SUFFIXES = (".png", ".svg")  # the plots are SVG; PNG from older runs still shows
SKIP_FIGURES = {"schema_version", "passed", "coverage_k", "version", "nominal", "thresholds"}


class NotARunFolder(ValueError):
    """The folder has no readable manifest.json: say which folder and what to do."""


@dataclass(frozen=True)
class Figure:
    """One number a run measured: ``analysis`` is the results file it came from."""

    name: str
    analysis: str
    value: float
    sigma: float | None
    unit: str


@dataclass
class RunRecord:
    """What the report and the history know about one run folder."""

    path: Path
    run_uid: str
    manifest: dict[str, Any]
    uut: dict[str, Any]
    verdicts: RunVerdicts
    figures: list[Figure]
    results: dict[str, Any]
    plots: dict[str, list[Path]] = field(default_factory=dict)

    @property
    def state(self) -> str:
        return str(self.manifest.get("state") or "unknown")

    @property
    def cause(self) -> str:
        return str(self.manifest.get("cause") or "")

    @property
    def plan(self) -> dict[str, Any]:
        return dict(self.manifest.get("plan") or {})

    @property
    def recipe(self) -> str:
        return str(self.plan.get("recipe") or "")

    @property
    def station(self) -> str:
        return str(self.plan.get("station") or "")

    @property
    def serial(self) -> str:
        return str(self.uut.get("serial") or self.plan.get("uut_serial") or "")

    @property
    def model(self) -> str:
        return str(self.uut.get("model") or "")

    @property
    def started(self) -> dt.datetime | None:
        return parse_utc(self.manifest.get("start_utc"))

    @property
    def ended(self) -> dt.datetime | None:
        return parse_utc(self.manifest.get("end_utc"))

    @property
    def finished(self) -> bool:
        return self.state not in ("running", "unknown") and self.ended is not None


def parse_utc(text: Any) -> dt.datetime | None:
    """'2026-01-01T00:10:08.033Z' -> naive UTC datetime (the history stores UTC)."""
    if not text:
        return None
    try:
        moment = dt.datetime.fromisoformat(str(text).replace("Z", "+00:00"))
    except ValueError:
        return None
    return moment.astimezone(dt.timezone.utc).replace(tzinfo=None)


def run_uid(path: Path, manifest: Mapping[str, Any]) -> str:
    """A run's identity in the history: the folder name plus a digest of where and when it
    started, so the same folder indexed twice (or from a copy) is one run, and two runs that
    happen to share a folder name on different benches are two."""
    first = (manifest.get("sessions") or [{}])[0]
    basis = json.dumps([manifest.get("host"), manifest.get("start_utc"), first.get("pid"),
                        first.get("started_clock"), path.name], sort_keys=True)
    return f"{path.name}#{hashlib.sha256(basis.encode()).hexdigest()[:12]}"


def load_uut(run: Path, manifest: Mapping[str, Any]) -> dict[str, Any]:
    """The UUT file as run (inputs/ copy): model, serial, spec limits."""
    rel = ((manifest.get("inputs") or {}).get("uut") or {}).get("relpath")
    if not rel or not (run / rel).is_file():
        return {}
    try:
        data = yaml.load((run / rel).read_text(encoding="utf-8"), Loader=_YAML_LOADER)
    except (OSError, yaml.YAMLError):
        return {}
    return data if isinstance(data, dict) else {}


def _number(x: Any) -> float | None:
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return None
    return float(x) if math.isfinite(x) else None


def flatten_figures(analysis: str, data: Any, prefix: str = "",
                    depth: int = 0) -> Iterator[Figure]:
    """Every finite scalar of a results file, named by its path ('summary.' dropped); a sibling
    ``uncertainty`` mapping gives the 1-sigma of the numbers beside it."""
    if not isinstance(data, Mapping) or depth > 3:
        return
    sigmas = data.get("uncertainty") if isinstance(data.get("uncertainty"), Mapping) else {}
    for key, value in data.items():
        if key in SKIP_FIGURES or key in ("uncertainty", "verdicts"):
            continue
        name = f"{prefix}{key}"
        number = _number(value)
        if number is not None:
            yield Figure(f"{analysis}.{name}", analysis, number, _number(sigmas.get(key)),
                         unit_of(str(key)) or unit_of(prefix.rstrip(".")))
        elif isinstance(value, Mapping):
            inner = "" if key == "summary" else f"{name}."
            yield from flatten_figures(analysis, value, f"{prefix}{inner}" if inner == ""
                                       else inner, depth + 1)


def _verdict_figures(verdicts: RunVerdicts) -> list[Figure]:
    return [Figure(r.key, r.analysis, r.value, r.sigma, r.unit) for r in verdicts.rows
            if r.value is not None]


def read_manifest(run: Path) -> dict[str, Any]:
    path = Path(run) / "manifest.json"
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise NotARunFolder(f"{run}: no manifest.json here; give a run folder "
                            "(runs/<time>_<serial>_<recipe>/)") from None
    except (OSError, ValueError) as exc:
        raise NotARunFolder(f"{path}: cannot be read ({exc}); run `nightbench verify {run}` "
                            "to see which files are sound") from None
    if not isinstance(data, dict) or data.get("format") != "nightbench-manifest":
        raise NotARunFolder(f"{path}: not a nightbench manifest; give a run folder")
    return data


def read_results(run: Path) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for path in sorted((run / "results").glob("*.json")):
        try:
            out[path.stem] = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue
    return out


def plots_by_analysis(run: Path, analyses: list[str]) -> dict[str, list[Path]]:
    """plots/<analysis>_*.png and *.svg grouped under their analysis; others under 'other'.

    The analyses draw SVG; runs made before that hold PNG plots; both are pictures."""
    out: dict[str, list[Path]] = {}
    folder = run / "plots"
    pictures = sorted(p for p in folder.glob("*") if p.suffix.lower() in PLOT_SUFFIXES and p.is_file())
    for pic in pictures:
        owner = next((a for a in analyses if pic.stem.startswith(a)), "other")
        out.setdefault(owner, []).append(pic)
    return out


def read_run(run: Path | str) -> RunRecord:
    """Everything the report and the history need from one run folder (finished or not)."""
    path = Path(run).resolve()
    manifest = read_manifest(path)
    uut = load_uut(path, manifest)
    verdicts = read_verdicts(path / "results", uut.get("spec_limits") or {})
    results = read_results(path)
    figures = _verdict_figures(verdicts)
    for name, data in results.items():
        if name != "verdicts":
            figures += list(flatten_figures(name, data))
    unique = {f.name: f for f in reversed(figures)}  # a verdict's figure wins over a copy
    analyses = [n for n in results if n != "verdicts"]
    return RunRecord(path, run_uid(path, manifest), manifest, uut, verdicts,
                     list(reversed(unique.values())), results, plots_by_analysis(path, analyses))
