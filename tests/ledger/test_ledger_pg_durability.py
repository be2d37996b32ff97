"""An append to the PostgreSQL ledger returns only once its entry is on disk, although the
entry's own commit releases the head before the flush (pg_store's ``_INSERT_COMMIT_SQL``).

Checked against the server itself: a server whose WAL writer would not flush on its own for
10 s (``wal_writer_delay = 10s``, the setting's maximum; PostgreSQL documentation, "WAL
Configuration") is crashed (``pg_ctl stop -m immediate``: nothing left in shared memory is
written) right after appends return, restarted, and must still hold every entry. With the
entry's commit left asynchronous and no synchronous commit after it, the entries still in the
WAL buffers would be lost here; a crash can only take back what no append has confirmed.
"""

from __future__ import annotations

from collections.abc import Iterator

import pytest
from ledger_helpers import content
from pg_server import PgServer, running_server

from closecall.review.ledger.pg_store import open_pg_ledger, setup


@pytest.fixture(scope="module")
def lazy_server() -> Iterator[PgServer]:
    """A server of its own (it is crashed), whose WAL writer waits 10 s between rounds."""
    yield from running_server(("wal_writer_delay=10s", "wal_writer_flush_after=0"))


def test_every_returned_append_survives_a_crash(lazy_server: PgServer) -> None:
    url = lazy_server.create_database("durability")
    setup(url)
    recorded: list[tuple[int, str]] = []
    for round_ in range(4):
        with open_pg_ledger(url) as ledger:
            for i in range(3):
                entry = ledger.append(content(f"round {round_}, entry {i}", case_id=f"D-{i}"))
                recorded.append((entry.seq, entry.hash))
        lazy_server.crash_and_restart()
        with open_pg_ledger(url, readonly=True) as ledger:
            stored = [(e.seq, e.hash) for e in ledger.entries()]
            result = ledger.verify()
        assert stored == recorded, f"after crash {round_ + 1}"
        assert result.ok and result.verified == len(recorded)


def test_verify_reports_a_head_that_is_on_disk(lazy_server: PgServer) -> None:
    url = lazy_server.create_database("durable_head")
    setup(url)
    with open_pg_ledger(url) as ledger:
        ledger.append(content("one"))
        assert ledger.wait_durable(timeout=0.0) is True  # the append's own flush covers it
        result = ledger.verify()
    assert result.ok and result.head_seq == 1
