"""The at-rest copy an analyst reads (review/ledger/reader.py): only a copy proved consistent.

No OS accounts needed: these check the rules themselves — a ledger with WAL companions is not
copied, a file that changes while it is read is not used, and a copy at rest reads exactly
what the file holds (the chain verifies and the entries match SQLite's own reading).
"""

from __future__ import annotations

import sqlite3
from pathlib import Path

import pytest

from closecall.core.vocabulary import ACTIONS
from closecall.review.ledger import open_ledger
from closecall.review.ledger.entry import EntryContent
from closecall.review.ledger.reader import copy_at_rest, reader_connection


def _content(i: int) -> EntryContent:
    return EntryContent(
        reviewer="alice",
        case_id=f"A-{i}",
        snapshot_id="feedc0ffee000001",
        current_snapshot_id=None,
        reference_model="pooled",
        reference_decision="favourable",
        reference_margin=0.1,
        decisions={"pooled": {"decision": "favourable", "margin": 0.1}},
        action=ACTIONS[0],
        reason=None,
        note=f"note {i}",
    )


@pytest.fixture
def ledger(tmp_path: Path) -> Path:
    path = tmp_path / "ledger.sqlite"
    with open_ledger(path) as led:
        for i in range(5):
            led.append(_content(i))
    assert not Path(f"{path}-wal").exists()  # the last writer folded the WAL in: at rest
    return path


def test_a_copy_at_rest_reads_what_sqlite_reads(ledger: Path) -> None:
    conn = copy_at_rest(ledger)
    assert conn is not None
    direct = sqlite3.connect(f"file:{ledger}?mode=ro", uri=True)
    query = "SELECT seq, reviewer, case_id, note, hash FROM entries ORDER BY seq"
    assert conn.execute(query).fetchall() == direct.execute(query).fetchall()
    assert len(conn.execute(query).fetchall()) == 5
    direct.close()
    conn.close()
    assert ledger.read_bytes()[18:20] == b"\x02\x02"  # the file itself is untouched (WAL)


def test_no_copy_while_a_writer_has_it_open(ledger: Path) -> None:
    writer = sqlite3.connect(ledger)
    writer.execute("SELECT COUNT(*) FROM entries").fetchone()  # opens the WAL companions
    try:
        assert Path(f"{ledger}-wal").exists()
        assert copy_at_rest(ledger) is None
    finally:
        writer.close()
    assert copy_at_rest(ledger) is not None  # at rest again


def test_no_copy_of_a_file_that_changed_while_it_was_read(
    ledger: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    real = Path.read_bytes

    def read_then_touch(self: Path) -> bytes:
        data = real(self)
        with open(self, "r+b") as f:  # a checkpoint rewriting a page meanwhile
            f.seek(len(data) - 1)
            f.write(data[-1:])
        return data

    monkeypatch.setattr(Path, "read_bytes", read_then_touch)
    assert copy_at_rest(ledger) is None


class _Refused(sqlite3.Connection):
    """What a read-only open of a WAL file at rest does without write access to its folder."""

    def execute(self, *args: object, **kwargs: object) -> sqlite3.Cursor:
        raise sqlite3.OperationalError("attempt to write a readonly database")


def test_the_reader_uses_sqlite_when_it_can_and_the_copy_when_sqlite_refuses(
    ledger: Path,
) -> None:
    plain = reader_connection(
        ledger, lambda: sqlite3.connect(f"file:{ledger}?mode=ro", uri=True), timeout=1.0
    )
    assert plain.execute("PRAGMA journal_mode").fetchone()[0] == "wal"  # SQLite's own open
    plain.close()
    last = sqlite3.connect(ledger)
    last.execute("SELECT 1 FROM entries").fetchone()
    last.close()  # a writer's last close folds the WAL in and removes it: at rest
    assert not Path(f"{ledger}-wal").exists()
    copy = reader_connection(ledger, lambda: sqlite3.connect(ledger, factory=_Refused), timeout=1.0)
    assert copy.execute("SELECT COUNT(*) FROM entries").fetchone()[0] == 5
    assert not isinstance(copy, _Refused)  # the in-memory copy
    copy.close()
    writer = sqlite3.connect(ledger)
    writer.execute("SELECT 1 FROM entries").fetchone()  # not at rest, and SQLite refuses
    try:
        with pytest.raises(sqlite3.OperationalError):
            reader_connection(
                ledger, lambda: sqlite3.connect(ledger, factory=_Refused), timeout=0.2
            )
    finally:
        writer.close()
