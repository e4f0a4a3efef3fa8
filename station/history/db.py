"""Which history database, opening it, and bringing its schema to the current revision.

The database is chosen by a URL: the environment variable NIGHTBENCH_HISTORY_URL wins, then the
station file's ``history: {url: ...}``, else an SQLite file ``history.sqlite`` beside the run
folders (no set-up). A PostgreSQL URL (``postgresql+psycopg://user@host/db``) goes through
psycopg 3. Migrations run on every open, under a lock, so the first process of many to meet an
empty database creates the schema and the others wait for it.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import yaml
from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine, create_engine, event, func, select
from sqlalchemy.engine import make_url

ENV_VAR = "NIGHTBENCH_HISTORY_URL"
SQLITE_NAME = "history.sqlite"
MIGRATIONS = Path(__file__).resolve().parent / "migrations"
_LOCK_KEY = 0x6E62686973  # PostgreSQL advisory lock id of the history migrations ("nbhis")


class HistoryError(RuntimeError):
    """The history database cannot be used: names the URL (password hidden) and what to do."""


def station_history_url(station_file: Path | str | None) -> str | None:
    """``history: {url: ...}`` of a station file (or its copy in a run folder's inputs/)."""
    if station_file is None or not Path(station_file).is_file():
        return None
    try:
        data = yaml.safe_load(Path(station_file).read_text(encoding="utf-8"))
    except (OSError, yaml.YAMLError):
        return None
    history = data.get("history") if isinstance(data, Mapping) else None
    url = history.get("url") if isinstance(history, Mapping) else None
    return str(url) if url else None


def resolve_url(*, explicit: str | None = None, station_file: Path | str | None = None,
                runs_dir: Path | str = "runs", environ: Mapping[str, str] | None = None) -> str:
    """The history URL by precedence: explicit > environment > station file > SQLite file."""
    env = os.environ if environ is None else environ
    for url in (explicit, env.get(ENV_VAR), station_history_url(station_file)):
        if url:
            return normalise_url(url)
    return f"sqlite:///{(Path(runs_dir).resolve() / SQLITE_NAME).as_posix()}"


def normalise_url(url: str) -> str:
    """A plain postgresql:// URL means psycopg 3 (the driver this project installs)."""
    if url.startswith("postgresql://") or url.startswith("postgres://"):
        return "postgresql+psycopg://" + url.split("://", 1)[1]
    return url


def safe_url(url: str) -> str:
    try:
        return make_url(url).render_as_string(hide_password=True)
    except Exception:  # noqa: BLE001 - a malformed URL is still named in the message
        return url


def _sqlite_pragmas(dbapi_connection: Any, _record: Any) -> None:
    # SQLAlchemy's documented recipe for real SQLite transactions: the driver must not open
    # them itself (so DDL is transactional and the migration atomic) ...
    dbapi_connection.isolation_level = None
    cur = dbapi_connection.cursor()
    cur.execute("PRAGMA foreign_keys=ON")
    cur.execute("PRAGMA journal_mode=WAL")
    cur.execute("PRAGMA busy_timeout=30000")
    cur.close()


def _sqlite_begin(conn: Any) -> None:
    # ... and each transaction takes the write lock at its start, so concurrent writers
    # (several runs ending at once, a first migration) queue on busy_timeout instead of
    # failing when a read lock cannot be upgraded.
    conn.exec_driver_sql("BEGIN IMMEDIATE")


def open_engine(url: str, *, migrate_schema: bool = True) -> Engine:
    """An engine on the history database with the schema at the latest revision."""
    url = normalise_url(url)
    try:
        parsed = make_url(url)
    except Exception as exc:  # noqa: BLE001
        raise HistoryError(f"history database URL {url!r} is not valid ({exc}); e.g. "
                           "sqlite:///runs/history.sqlite or postgresql://user@host/db") from exc
    if parsed.get_backend_name() == "sqlite":
        if parsed.database:
            Path(parsed.database).parent.mkdir(parents=True, exist_ok=True)
        engine = create_engine(url, connect_args={"timeout": 30})
        event.listen(engine, "connect", _sqlite_pragmas)
        event.listen(engine, "begin", _sqlite_begin)
    else:
        engine = create_engine(url, pool_pre_ping=True)
    if migrate_schema:
        migrate(engine)
    return engine


def _alembic_config() -> Config:
    cfg = Config()
    cfg.set_main_option("script_location", str(MIGRATIONS))
    return cfg


def head_revision() -> str:
    return str(ScriptDirectory.from_config(_alembic_config()).get_current_head())


def current_revision(engine: Engine) -> str | None:
    with engine.connect() as conn:
        return MigrationContext.configure(conn).get_current_revision()


def migrate(engine: Engine) -> None:
    """Upgrade the schema to head. On PostgreSQL a transaction-scoped advisory lock serialises
    concurrent first opens; SQLite serialises writers itself."""
    try:
        if current_revision(engine) == head_revision():
            return
        cfg = _alembic_config()
        with engine.begin() as conn:
            if conn.dialect.name == "postgresql":
                conn.execute(select(func.pg_advisory_xact_lock(_LOCK_KEY)))
            cfg.attributes["connection"] = conn
            command.upgrade(cfg, "head")
    except HistoryError:
        raise
    except Exception as exc:  # noqa: BLE001 - connection refused, auth, disk: one message
        raise HistoryError(f"history database {safe_url(str(engine.url))}: {exc}".splitlines()[0]
                           + " (check the URL in NIGHTBENCH_HISTORY_URL or the station file's "
                             "history: url, and that the server is running)") from exc
