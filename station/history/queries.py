"""The questions the history answers: which runs, one figure's trend, two runs compared."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sqlalchemy import Engine, select

from station.history.models import FigureRow, Run, VerdictEntry
from station.history.stats import Change, ControlChart, compare_values, individuals_chart
from station.report.runread import Figure, NotARunFolder, read_run

RUN_COLUMNS = ("started_at", "uut_model", "uut_serial", "station", "recipe", "state", "outcome",
               "n_pass", "n_marginal", "n_fail", "run_uid")


@dataclass(frozen=True)
class RunFilter:
    serial: str | None = None
    model: str | None = None
    station: str | None = None
    recipe: str | None = None
    outcome: str | None = None
    state: str | None = None
    since: dt.datetime | None = None
    until: dt.datetime | None = None

    def apply(self, stmt: Any) -> Any:
        for column, value in ((Run.uut_serial, self.serial), (Run.uut_model, self.model),
                              (Run.station, self.station), (Run.recipe, self.recipe),
                              (Run.outcome, self.outcome), (Run.state, self.state)):
            if value is not None:
                stmt = stmt.where(column == value)
        if self.since is not None:
            stmt = stmt.where(Run.started_at >= self.since)
        if self.until is not None:
            stmt = stmt.where(Run.started_at < self.until)
        return stmt


def list_runs(engine: Engine, filt: RunFilter = RunFilter(), limit: int | None = None
              ) -> list[dict[str, Any]]:
    """Runs matching ``filt``, newest first, as plain rows (RUN_COLUMNS)."""
    stmt = filt.apply(select(*(getattr(Run, c) for c in RUN_COLUMNS))).order_by(
        Run.started_at.desc(), Run.id.desc())
    if limit:
        stmt = stmt.limit(limit)
    with engine.connect() as conn:
        return [dict(r._mapping) for r in conn.execute(stmt)]


@dataclass(slots=True)
class TrendPoint:
    started_at: dt.datetime | None
    serial: str
    run_uid: str
    value: float
    sigma: float | None
    outlier: bool = False


@dataclass
class Trend:
    figure: str
    unit: str
    by: str
    points: list[TrendPoint] = field(default_factory=list)
    chart: ControlChart | None = None
    limit: float | None = None
    sense: str | None = None


def trend(engine: Engine, figure: str, filt: RunFilter = RunFilter(), by: str = "time"
          ) -> Trend:
    """One figure over time (every run, oldest first) or across serials (the latest run of each
    serial, in serial order), with its control chart and the spec limit when one judged it."""
    stmt = filt.apply(
        select(Run.started_at, Run.uut_serial, Run.run_uid, FigureRow.value, FigureRow.sigma
               ).join(FigureRow, FigureRow.run_id == Run.id)
        .where(FigureRow.name == figure)).order_by(Run.started_at, Run.id)
    with engine.connect() as conn:
        rows = conn.execute(stmt)
        points = [TrendPoint(*r) for r in rows]  # rows unpack as tuples: fast for 100,000
        unit = conn.execute(select(FigureRow.unit).where(FigureRow.name == figure).limit(1)
                            ).scalar() or ""
        limit_row = conn.execute(
            select(VerdictEntry.limit, VerdictEntry.sense).where(
                VerdictEntry.key == figure.rsplit(".", 1)[-1]).order_by(
                VerdictEntry.run_id.desc()).limit(1)).first()  # the newest: index (key, run_id)
    if by == "serial":
        latest: dict[str, TrendPoint] = {}
        for p in points:
            latest[p.serial] = p
        points = [latest[s] for s in sorted(latest)]
    out = Trend(figure, unit, by, points,
                limit=limit_row.limit if limit_row else None,
                sense=limit_row.sense if limit_row else None)
    if points:
        out.chart = individuals_chart([p.value for p in points])
        for i in out.chart.outliers:
            points[i].outlier = True
    return out


def figure_names(engine: Engine, like: str = "") -> list[str]:
    stmt = select(FigureRow.name).distinct().order_by(FigureRow.name)
    if like:
        stmt = stmt.where(FigureRow.name.contains(like))
    with engine.connect() as conn:
        return list(conn.execute(stmt.limit(200)).scalars())


@dataclass(frozen=True)
class ComparedFigure:
    name: str
    unit: str
    a: float
    u_a: float | None
    b: float
    u_b: float | None
    change: Change


def _figures_of(run: str, engine: Engine | None) -> tuple[str, dict[str, Figure]]:
    """A run's figures from its folder, or from the history by run id or folder name."""
    path = Path(run)
    if (path / "manifest.json").is_file():
        record = read_run(path)
        return record.run_uid, {f.name: f for f in record.figures}
    if engine is None:
        raise NotARunFolder(f"{run}: not a run folder, and no history to look it up in")
    with engine.connect() as conn:
        row = conn.execute(select(Run.id, Run.run_uid).where(
            (Run.run_uid == run) | (Run.run_uid.startswith(f"{path.name}#"))).order_by(
            Run.id.desc()).limit(1)).first()
        if row is None:
            raise NotARunFolder(f"{run}: neither a run folder nor a run in the history; "
                                "see `nightbench runs` for the recorded runs")
        figs = conn.execute(select(FigureRow.name, FigureRow.analysis, FigureRow.value,
                                   FigureRow.sigma, FigureRow.unit)
                            .where(FigureRow.run_id == row.id)).all()
        return row.run_uid, {f.name: Figure(f.name, f.analysis, f.value, f.sigma, f.unit)
                             for f in figs}


def compare_runs(run_a: str, run_b: str, engine: Engine | None = None
                 ) -> tuple[str, str, list[ComparedFigure]]:
    """Every figure both runs have: b - a, combined uncertainty, E_n and significance."""
    uid_a, figs_a = _figures_of(run_a, engine)
    uid_b, figs_b = _figures_of(run_b, engine)
    rows = []
    for name in (n for n in figs_a if n in figs_b):
        fa, fb = figs_a[name], figs_b[name]
        rows.append(ComparedFigure(name, fa.unit or fb.unit, fa.value, fa.sigma, fb.value,
                                   fb.sigma, compare_values(fa.value, fa.sigma, fb.value,
                                                            fb.sigma)))
    return uid_a, uid_b, rows
