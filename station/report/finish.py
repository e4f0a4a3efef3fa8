"""What happens after a run's manifest is closed: write its report, record it in the history.

Neither may fail the run or lose its data: the run is already complete on disk. A report that
cannot be written is said and can be made later with `nightbench report RUN`; a history database
that cannot be reached is recorded in the run folder (history-pending.json) and `nightbench
index RUNS_DIR` catches up.
"""

from __future__ import annotations

import datetime as dt
import json
from pathlib import Path

from station.report.render import write_report
from station.report.runread import PENDING_NAME


def _station_copy(run: Path) -> Path | None:
    copies = sorted((run / "inputs").glob("station__*"))
    return copies[0] if copies else None


def record_in_history(run: Path, url: str | None = None) -> str:
    """Index one run; on any failure write history-pending.json and say why (never raises)."""
    from station.history.db import resolve_url, safe_url

    url = url or resolve_url(station_file=_station_copy(run), runs_dir=run.parent)
    try:
        from station.history.db import open_engine
        from station.history.index import index_runs

        engine = open_engine(url)
        try:
            summary = index_runs(engine, [run])
        finally:
            engine.dispose()
        if summary.problems:
            raise RuntimeError("; ".join(summary.problems))
        return f"history: recorded in {safe_url(url)}"
    except Exception as exc:  # noqa: BLE001 - the run must end whatever the database does
        text = str(exc).splitlines()[0] if str(exc) else repr(exc)
        (run / PENDING_NAME).write_text(json.dumps({
            "url": safe_url(url), "error": text,
            "utc": dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")}, indent=2),
            encoding="utf-8")
        return (f"history: NOT recorded ({text}); the run is complete on disk - run "
                f"`nightbench index {run.parent}` when the database is back")


def finish_run(run: Path | str, history_url: str | None = None) -> list[str]:
    """Write report.html and record the run in the history; returns lines for the console."""
    run = Path(run)
    lines = []
    try:
        lines.append(f"report: {write_report(run)}")
    except Exception as exc:  # noqa: BLE001 - a report problem never fails a finished run
        lines.append(f"report: NOT written ({exc!r}); try `nightbench report {run}`")
    lines.append(record_in_history(run, history_url))
    return lines
