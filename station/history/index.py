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
from sqlalchemy.dialects import postgresql, sqlite

from station.history.models import FigureRow, Run, VerdictEntry
from station.report.runread import NotARunFolder, RunRecord, read_run
from station.report.verdict_rows import count_by_status

from station.report.finish import PENDING_NAME


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
    ins = _insert_for(engine)
    values = run_values(record)
    with engine.begin() as conn:
        stmt = (ins(Run).values(**values).on_conflict_do_nothing(index_elements=["run_uid"])
                .returning(Run.id))
        run_pk = conn.execute(stmt).scalar()
        if run_pk is None:
            row = conn.execute(select(Run.id, Run.ended_at, Run.state)
                               .where(Run.run_uid == record.run_uid)).one()
            if (row.ended_at, row.state) == (values["ended_at"], values["state"]):
                return False
            conn.execute(delete(FigureRow).where(FigureRow.run_id == row.id))
            conn.execute(delete(VerdictEntry).where(VerdictEntry.run_id == row.id))
            conn.execute(delete(Run).where(Run.id == row.id))
            run_pk = conn.execute(stmt).scalar()
            if run_pk is None:  # another process replaced it in the meantime
                return False
        figures, verdicts = _children(run_pk, record)
        if figures:
            conn.execute(insert(FigureRow), figures)
        if verdicts:
            conn.execute(insert(VerdictEntry), verdicts)
    return True


def run_folders(root: Path | str) -> Iterator[Path]:
    """Every run folder under ``root`` (a folder with a manifest.json), or ``root`` itself."""
    root = Path(root)
    if (root / "manifest.json").is_file():
        yield root
        return
    for manifest in sorted(root.glob("*/manifest.json")):
        yield manifest.parent


def index_runs(engine: Engine, folders: Iterable[Path]) -> IndexSummary:
    """Record every finished run among ``folders``; a folder that cannot be read is named in
    the summary and skipped, never stops the pass."""
    summary = IndexSummary()
    for folder in folders:
        try:
            record = read_run(folder)
        except (NotARunFolder, OSError, ValueError) as exc:
            summary.problems.append(f"{folder}: {exc}")
            continue
        if not record.finished:
            summary.unfinished += 1
            continue
        if record_run(engine, record):
            summary.added += 1
        else:
            summary.already += 1
        (Path(folder) / PENDING_NAME).unlink(missing_ok=True)
    return summary
