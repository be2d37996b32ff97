"""Fixtures for the ledger tests: a throw-away PostgreSQL server for the whole session."""

from __future__ import annotations

import itertools
import os
from collections.abc import Iterator

import pytest
from pg_server import PgServer, running_server

_names = itertools.count(1)


@pytest.fixture(scope="session")
def pg_server() -> Iterator[PgServer]:
    """A running PostgreSQL server for the whole session."""
    yield from running_server()


@pytest.fixture
def pg_db(pg_server: PgServer) -> str:
    """The superuser's URL of a new, empty database."""
    return pg_server.create_database(f"ledger_{os.getpid()}_{next(_names)}")
