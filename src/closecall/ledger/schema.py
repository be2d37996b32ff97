"""The ledger's SQLite schema, built and upgraded by numbered migrations.

A new file runs every migration in order; an older file runs the ones it lacks, inside one write
transaction. Migrations may add tables, columns and indexes; they never change recorded entries
(the append-only triggers would refuse it anyway).
"""

from __future__ import annotations

import sqlite3
from collections.abc import Callable

#: Marker stored in the meta table so a random SQLite file is not taken for a ledger.
APPLICATION = "closecall-ledger"


def _v1(conn: sqlite3.Connection) -> None:
    """Entries, the append-only triggers and the meta table."""
    conn.execute(
        """
        CREATE TABLE entries (
            seq                 INTEGER PRIMARY KEY,
            format              INTEGER NOT NULL,
            time                TEXT    NOT NULL,
            reviewer            TEXT    NOT NULL,
            case_id             TEXT    NOT NULL,
            snapshot_id         TEXT    NOT NULL,
            current_snapshot_id TEXT,
            reference_model     TEXT    NOT NULL,
            reference_decision  TEXT    NOT NULL,
            reference_margin    REAL,
            decisions           TEXT    NOT NULL,
            action              TEXT    NOT NULL,
            reason              TEXT,
            note                TEXT    NOT NULL,
            supersedes          INTEGER,
            prev_hash           TEXT    NOT NULL,
            hash                TEXT    NOT NULL UNIQUE
        )
        """
    )
    conn.execute("CREATE INDEX entries_case ON entries(case_id, seq)")
    conn.execute("CREATE INDEX entries_reviewer ON entries(reviewer, seq)")
    conn.execute(
        """
        CREATE TRIGGER entries_no_update BEFORE UPDATE ON entries
        BEGIN SELECT RAISE(ABORT, 'closecall ledger is append-only: entries cannot be changed'); END
        """
    )
    conn.execute(
        """
        CREATE TRIGGER entries_no_delete BEFORE DELETE ON entries
        BEGIN SELECT RAISE(ABORT, 'closecall ledger is append-only: entries cannot be deleted'); END
        """
    )
    conn.execute("CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT NOT NULL)")
    conn.execute("INSERT INTO meta VALUES ('application', ?)", (APPLICATION,))


def _v2(conn: sqlite3.Connection) -> None:
    """Drafts and soft claims: working state outside the chain."""
    conn.execute(
        """
        CREATE TABLE drafts (
            reviewer TEXT NOT NULL,
            case_id  TEXT NOT NULL,
            action   TEXT,
            reason   TEXT,
            note     TEXT NOT NULL,
            updated  TEXT NOT NULL,
            PRIMARY KEY (reviewer, case_id)
        )
        """
    )
    conn.execute(
        """
        CREATE TABLE claims (
            case_id    TEXT NOT NULL,
            reviewer   TEXT NOT NULL,
            claimed_at TEXT NOT NULL,
            expires_at TEXT NOT NULL,
            PRIMARY KEY (case_id, reviewer)
        )
        """
    )
    conn.execute("CREATE INDEX claims_expiry ON claims(expires_at)")


#: MIGRATIONS[k] takes a file from schema version k to k + 1.
MIGRATIONS: tuple[Callable[[sqlite3.Connection], None], ...] = (_v1, _v2)
SCHEMA_VERSION = len(MIGRATIONS)

TRIGGERS = ("entries_no_update", "entries_no_delete")


def schema_version(conn: sqlite3.Connection) -> int:
    """The file's schema version; 0 for an empty file."""
    has_table = conn.execute(
        "SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = 'schema_version'"
    ).fetchone()
    if not has_table:
        return 0
    row = conn.execute("SELECT MAX(version) FROM schema_version").fetchone()
    return int(row[0] or 0)


def is_empty(conn: sqlite3.Connection) -> bool:
    """True if the file holds no tables at all (a brand-new database)."""
    return conn.execute("SELECT COUNT(*) FROM sqlite_master").fetchone()[0] == 0


def migrate(conn: sqlite3.Connection, target: int = SCHEMA_VERSION) -> list[int]:
    """Apply the missing migrations up to ``target``; the caller holds the write lock.

    Returns the versions applied (empty when the file was current).
    """
    current = schema_version(conn)
    if current == 0:
        conn.execute(
            "CREATE TABLE IF NOT EXISTS schema_version ("
            "version INTEGER PRIMARY KEY, applied_at TEXT NOT NULL)"
        )
    applied = []
    for version in range(current + 1, target + 1):
        MIGRATIONS[version - 1](conn)
        conn.execute(
            "INSERT INTO schema_version VALUES (?, strftime('%Y-%m-%dT%H:%M:%fZ', 'now'))",
            (version,),
        )
        applied.append(version)
    return applied


def missing_triggers(conn: sqlite3.Connection) -> list[str]:
    """Names of append-only triggers that are not in the file (someone dropped them)."""
    present = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'trigger'")}
    return [t for t in TRIGGERS if t not in present]
