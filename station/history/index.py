"""Record finished runs in the history, once each, from any number of processes at once.

The run row goes in with INSERT ... ON CONFLICT (run_uid) DO NOTHING RETURNING id, written with
the dialect's own insert construct (PostgreSQL or SQLite) by SQLAlchemy; the figures and verdicts
follow in the same transaction only when the row was new. Two processes indexing the same folder
therefore record it once, and re-indexing is a no-op. A run recorded while interrupted and later
resumed to a different end is replaced (its end time differs).
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sqlalchemy import Engine, delete, insert, select
from sqlalchemy.exc import OperationalError
from sqlalchemy.dialects import postgresql, sqlite

from station.history.models import FigureRow, Run, VerdictEntry
from station.report.runread import PENDING_NAME, NotARunFolder, RunRecord, read_run
from station.report.verdict_rows import count_by_status


BATCH = 100
RETRIES = 3


@dataclass
class IndexSummary:
    """What one `index` pass did: new runs, ones already there, folders it could not read."""

    added: int = 0
    already: int = 0
    unfinished: int = 0
    problems: list[str] = field(default_factory=list)


def _insert_for(engine: Engine) -> Callable[..., Any]:
    name = engine.dialect.name
    if name == "postgresql":
        return postgresql.insert
    if name == "sqlite":
        return sqlite.insert
    raise ValueError(f"the history supports SQLite and PostgreSQL, not {name}")


def run_values(record: RunRecord) -> dict[str, Any]:
    counts = count_by_status(record.verdicts.rows)
    m = record.manifest
    return {"run_uid": record.run_uid, "folder": str(record.path), "uut_model": record.model,
            "uut_serial": record.serial, "station": record.station, "recipe": record.recipe,
            "host": str(m.get("host") or ""), "software_version": str(m.get("software_version")
                                                                     or ""),
            "started_at": record.started, "ended_at": record.ended, "state": record.state,
            "cause": record.cause, "outcome": record.verdicts.outcome, "n_pass": counts["PASS"],
            "n_marginal": counts["MARGINAL"], "n_fail": counts["FAIL"],
            "indexed_at": dt.datetime.now(dt.timezone.utc).replace(tzinfo=None)}


def _children(run_pk: int, record: RunRecord) -> tuple[list[dict[str, Any]],
                                                        list[dict[str, Any]]]:
    figures = [{"run_id": run_pk, "name": f.name[:200], "analysis": f.analysis, "value": f.value,
                "sigma": f.sigma, "unit": f.unit} for f in record.figures]
    verdicts = [{"run_id": run_pk, "key": v.key, "quantity": v.quantity, "analysis": v.analysis,
                 "value": v.value, "sigma": v.sigma, "unit": v.unit, "limit": v.limit,
                 "sense": v.sense, "margin": v.margin, "status": v.status,
                 "conditions": dict(v.conditions)} for v in record.verdicts.rows]
    return figures, verdicts


def record_run(engine: Engine, record: RunRecord) -> bool:
    """Record one run; True when it was new (False: already recorded, nothing changed)."""
    return bool(record_runs(engine, [record]))


def record_runs(engine: Engine, records: list[RunRecord]) -> int:
    """Record a batch of runs in one transaction; returns how many were new.

    Rows go in sorted by run_uid, so concurrent batches lock unique keys in the same order and
    cannot deadlock; a transaction that still loses a race (a deadlock or serialisation error
    reported by the server) is retried.
    """
    by_uid = {r.run_uid: r for r in records}
    for attempt in range(RETRIES):
        try:
            with engine.begin() as conn:
                return _record_batch(conn, engine, [by_uid[u] for u in sorted(by_uid)])
        except OperationalError:
            if attempt == RETRIES - 1:
                raise
    return 0


def _record_batch(conn: Any, engine: Engine, records: list[RunRecord]) -> int:
    if not records:
        return 0
    ins = _insert_for(engine)
    values = [run_values(r) for r in records]
    stmt = ins(Run).on_conflict_do_nothing(index_elements=["run_uid"]).returning(
        Run.id, Run.run_uid)
    new = {uid: pk for pk, uid in conn.execute(stmt.values(values)).all()}
    stale = _changed_since_recorded(conn, [v for v in values if v["run_uid"] not in new])
    if stale:
        ids = list(stale.values())
        conn.execute(delete(FigureRow).where(FigureRow.run_id.in_(ids)))
        conn.execute(delete(VerdictEntry).where(VerdictEntry.run_id.in_(ids)))
        conn.execute(delete(Run).where(Run.id.in_(ids)))
        again = [v for v in values if v["run_uid"] in stale]
        new.update({uid: pk for pk, uid in conn.execute(stmt.values(again)).all()})
    figures: list[dict[str, Any]] = []
    verdicts: list[dict[str, Any]] = []
    for record in records:
        if record.run_uid in new:
            f, v = _children(new[record.run_uid], record)
            figures += f
            verdicts += v
    if figures:
        conn.execute(insert(FigureRow), figures)
    if verdicts:
        conn.execute(insert(VerdictEntry), verdicts)
    return len(new)


def _changed_since_recorded(conn: Any, values: list[dict[str, Any]]) -> dict[str, int]:
    """Runs already recorded whose end differs now (resumed since): {run_uid: row id}."""
    if not values:
        return {}
    wanted = {v["run_uid"]: (v["ended_at"], v["state"]) for v in values}
    rows = conn.execute(select(Run.id, Run.run_uid, Run.ended_at, Run.state)
                        .where(Run.run_uid.in_(list(wanted)))).all()
    return {r.run_uid: r.id for r in rows if (r.ended_at, r.state) != wanted[r.run_uid]}


def run_folders(root: Path | str) -> Iterator[Path]:
    """Every run folder under ``root`` (a folder with a manifest.json), or ``root`` itself."""
    root = Path(root)
    if (root / "manifest.json").is_file():
        yield root
        return
    for manifest in sorted(root.glob("*/manifest.json")):
        yield manifest.parent


def index_runs(engine: Engine, folders: Iterable[Path], batch: int = BATCH) -> IndexSummary:
    """Record every finished run among ``folders``, ``batch`` runs per transaction; a folder
    that cannot be read is named in the summary and skipped, never stops the pass."""
    summary = IndexSummary()
    pending: list[RunRecord] = []

    def flush() -> None:
        added = record_runs(engine, pending)
        summary.added += added
        summary.already += len({r.run_uid for r in pending}) - added
        for record in pending:
            (record.path / PENDING_NAME).unlink(missing_ok=True)
        pending.clear()

    for folder in folders:
        try:
            record = read_run(folder)
        except (NotARunFolder, OSError, ValueError) as exc:
            summary.problems.append(f"{folder}: {exc}")
            continue
        if not record.finished:
            summary.unfinished += 1
            continue
        pending.append(record)
        if len(pending) >= batch:
            flush()
    flush()
    return summary
