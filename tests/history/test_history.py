"""The run history on SQLite and on a real PostgreSQL server (started by the tests).

Every test runs on both backends through the same SQLAlchemy code. Outside references: the
normalised error E_n and combined uncertainty (GUM JCGM 100:2008 5.1.2; ISO 13528:2015 9.7),
the individuals control chart with sigma from the average moving range / d2 (NIST/SEMATECH
e-Handbook of Statistical Methods 6.3.2.2), recomputed here with numpy.
"""

from __future__ import annotations

import datetime as dt
import json
import math

import numpy as np
import pytest
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import func, select

from station.history.db import current_revision, head_revision, open_engine
from station.history.index import index_runs, run_folders
from station.history.models import Base, FigureRow, Run, VerdictEntry
from station.history.queries import RunFilter, compare_runs, list_runs, trend
from station.report.finish import PENDING_NAME, finish_run
from tests.history.synthetic import NETD_LIMIT_MK, make_run

T0 = dt.datetime(2026, 3, 1, 22, 0, 0)


def test_migrations_bring_the_schema_to_the_models(history_url: str) -> None:
    engine = open_engine(history_url)
    assert current_revision(engine) == head_revision()
    with engine.connect() as conn:
        diffs = compare_metadata(MigrationContext.configure(conn), Base.metadata)
    # The migration and the models describe the same tables, columns and indexes.
    assert [d for d in diffs if d[0] not in ("add_constraint", "remove_constraint")] == []
    open_engine(history_url)  # a second open finds the schema at head and changes nothing
    assert current_revision(engine) == head_revision()


def test_each_run_recorded_once_and_reindexing_is_a_no_op(history_url: str, tmp_path) -> None:
    for i in range(6):
        make_run(tmp_path / "runs", serial=f"DEMO-{i:04d}", start=T0 + dt.timedelta(days=i),
                 netd_mk=44.0 + i, gathered=i % 2 == 0, pid=100 + i)
    engine = open_engine(history_url)
    first = index_runs(engine, run_folders(tmp_path / "runs"))
    again = index_runs(engine, run_folders(tmp_path / "runs"))
    assert (first.added, first.already, first.problems) == (6, 0, [])
    assert (again.added, again.already) == (0, 6)
    with engine.connect() as conn:
        assert conn.execute(select(func.count()).select_from(Run)).scalar() == 6
        # per run: the verdict's figure, 2 netd figures, efl and k1 from distortion.json
        assert conn.execute(select(func.count()).select_from(FigureRow)).scalar() == 6 * 5
        statuses = conn.execute(select(VerdictEntry.status).order_by(VerdictEntry.value)).all()
    # netd 44..49 mK +/- 1 against 50 mK with U = 2 mK: PASS up to 47, MARGINAL from 48 on
    assert [s for (s,) in statuses] == ["PASS"] * 4 + ["MARGINAL"] * 2


def test_list_and_filter_runs(history_url: str, tmp_path) -> None:
    for i, netd in enumerate([45.0, 53.0, 46.0, 55.0]):
        make_run(tmp_path / "runs", serial=f"DEMO-{i % 2}", start=T0 + dt.timedelta(days=i),
                 netd_mk=netd, pid=i)
    engine = open_engine(history_url)
    index_runs(engine, run_folders(tmp_path / "runs"))
    assert len(list_runs(engine)) == 4
    failed = list_runs(engine, RunFilter(outcome="FAILED"))
    assert sorted(r["uut_serial"] for r in failed) == ["DEMO-1", "DEMO-1"]
    assert [r["started_at"] for r in list_runs(engine, RunFilter(serial="DEMO-0"))] == [
        T0 + dt.timedelta(days=2), T0]  # newest first
    window = RunFilter(since=T0 + dt.timedelta(days=1), until=T0 + dt.timedelta(days=3))
    assert len(list_runs(engine, window)) == 2


def test_trend_is_an_individuals_chart_with_the_spec_limit(history_url: str, tmp_path) -> None:
    rng = np.random.default_rng(7)
    values = list(np.round(rng.normal(44.0, 0.4, 24), 4))
    values[17] = 49.0  # one unit far outside the population
    for i, v in enumerate(values):
        make_run(tmp_path / "runs", serial=f"DEMO-{i:04d}", start=T0 + dt.timedelta(hours=i),
                 netd_mk=float(v), pid=i)
    engine = open_engine(history_url)
    index_runs(engine, run_folders(tmp_path / "runs"))
    t = trend(engine, "netd_mk", RunFilter(model="nightbench demo imager LW-640"))
    got = [p.value for p in t.points]
    assert got == pytest.approx(values)  # oldest first
    x = np.array(values)
    sigma = np.mean(np.abs(np.diff(x))) / 1.128  # NIST e-Handbook 6.3.2.2
    assert t.chart.mean == pytest.approx(x.mean(), rel=1e-12)
    assert t.chart.sigma == pytest.approx(sigma, rel=1e-12)
    assert t.chart.upper == pytest.approx(x.mean() + 3 * sigma, rel=1e-12)
    assert [i for i, p in enumerate(t.points) if p.outlier] == [17]
    assert (t.limit, t.sense, t.unit) == (NETD_LIMIT_MK, "max", "mK")
    by_serial = trend(engine, "netd_mk", by="serial")
    assert [p.serial for p in by_serial.points] == sorted(f"DEMO-{i:04d}" for i in range(24))


def test_compare_two_runs_figure_by_figure(history_url: str, tmp_path) -> None:
    a = make_run(tmp_path / "runs", serial="DEMO-1", start=T0, netd_mk=45.0, netd_sigma_mk=1.0)
    b = make_run(tmp_path / "runs", serial="DEMO-1", start=T0 + dt.timedelta(days=7),
                 netd_mk=48.0, netd_sigma_mk=1.5, pid=2)
    c = make_run(tmp_path / "runs", serial="DEMO-1", start=T0 + dt.timedelta(days=8),
                 netd_mk=49.5, netd_sigma_mk=1.5, pid=3)
    engine = open_engine(history_url)
    index_runs(engine, [a, b, c])
    # b from its folder, a by its folder name in the history: the same answer either way
    _, _, rows = compare_runs(a.name, str(b), engine)
    netd = next(r for r in rows if r.name == "netd_mk")
    u_c = math.sqrt(1.0 ** 2 + 1.5 ** 2)  # GUM 5.1.2, uncorrelated
    assert netd.change.difference == pytest.approx(3.0)
    assert netd.change.u_combined == pytest.approx(u_c)
    assert netd.change.en == pytest.approx(3.0 / (2 * u_c))  # ISO 13528 E_n, k = 2: 0.83
    assert netd.change.significant is False
    _, _, rows = compare_runs(str(a), str(c), engine)
    netd = next(r for r in rows if r.name == "netd_mk")
    assert netd.change.en == pytest.approx(4.5 / (2 * u_c)) and netd.change.significant
    efl = next(r for r in rows if r.name == "distortion.efl_mm")
    assert efl.change.significant is None  # no uncertainty stated: not claimed either way


def test_unreachable_database_never_fails_the_run_and_index_catches_up(history_url: str,
                                                                       tmp_path) -> None:
    run = make_run(tmp_path / "runs", serial="DEMO-9", start=T0, netd_mk=45.0)
    lines = finish_run(run, "postgresql+psycopg://nobody@/none?host=/nonexistent-socket-dir")
    assert any(line.startswith("report: ") and "NOT" not in line for line in lines)
    assert any("history: NOT recorded" in line for line in lines)
    pending = json.loads((run / PENDING_NAME).read_text())
    assert pending["error"] and "nonexistent" in pending["url"]
    summary = index_runs(open_engine(history_url), run_folders(tmp_path / "runs"))
    assert summary.added == 1 and not (run / PENDING_NAME).exists()


def test_a_run_recorded_unfinished_then_resumed_is_replaced(history_url: str, tmp_path) -> None:
    run = make_run(tmp_path / "runs", serial="DEMO-5", start=T0, netd_mk=45.0, state="faulted")
    engine = open_engine(history_url)
    assert index_runs(engine, [run]).added == 1
    manifest = json.loads((run / "manifest.json").read_text())
    manifest.update(state="complete", end_utc="2026-03-02T01:00:00.000Z")
    (run / "manifest.json").write_text(json.dumps(manifest))
    assert index_runs(engine, [run]).added == 1
    rows = list_runs(engine)
    assert [(r["state"], r["n_pass"]) for r in rows] == [("complete", 1)]
