"""Fixtures: one PostgreSQL server per session (started only when a test asks for it), a fresh
database per test on it, and a fresh SQLite file per test."""

from __future__ import annotations

import itertools
from collections.abc import Iterator

import pytest

from tests.history.pg_server import PgServer, find_bindir, start_server
from tests.services import missing_service

_names = itertools.count(1)


@pytest.fixture(scope="session")
def pg_server() -> Iterator[PgServer]:
    bindir = find_bindir()
    if bindir is None:
        missing_service("PostgreSQL server binaries not found (apt-get install postgresql)")
    server = start_server(bindir)
    yield server
    server.stop()


@pytest.fixture(params=["sqlite", "postgresql"])
def history_url(request: pytest.FixtureRequest, tmp_path) -> str:
    """The history database of one test, on each backend."""
    if request.param == "sqlite":
        return f"sqlite:///{tmp_path / 'history.sqlite'}"
    server = request.getfixturevalue("pg_server")
    return server.create_database(f"t{next(_names)}")
