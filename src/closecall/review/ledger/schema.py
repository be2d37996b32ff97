"""The ledger's SQLite schema, built and upgraded by numbered migrations.

A new file runs every migration in order; an older file runs the ones it lacks, inside one write
transaction. Migrations may add tables, columns and indexes; they never change recorded entries
(the append-only triggers would refuse it anyway).
"""

from __future__ import annotations

import functools
import re
import sqlite3
from collections.abc import Callable
from dataclasses import dataclass

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


def _v3(conn: sqlite3.Connection) -> None:
    """Entry format 2: the author's signature (base64 Ed25519; NULL when unsigned)."""
    conn.execute("ALTER TABLE entries ADD COLUMN signature TEXT")


def _v4(conn: sqlite3.Connection) -> None:
    """Claims carry the id of the review screen that took them (NULL: taken by an older one)."""
    conn.execute("ALTER TABLE claims ADD COLUMN instance TEXT")


#: MIGRATIONS[k] takes a file from schema version k to k + 1.
MIGRATIONS: tuple[Callable[[sqlite3.Connection], None], ...] = (_v1, _v2, _v3, _v4)
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


# --------------------------------------------------------------------------- structure check

#: One token of SQL text: a string literal, a quoted identifier, a comment, white space, a
#: word, a number or one other character.
_TOKEN = re.compile(
    r"""'(?:[^']|'')*'|"(?:[^"]|"")*"|`(?:[^`]|``)*`|\[[^\]]*\]|--[^\n]*|/\*.*?(?:\*/|$)"""
    r"|\s+|[A-Za-z_][A-Za-z0-9_$]*|\d+(?:\.\d*)?|.",
    re.S,
)


def normalise_sql(sql: str | None) -> tuple[str, ...]:
    """The tokens of ``sql`` with white space and comments dropped, words case-folded and
    quoted identifiers unquoted; string literals are kept exactly.

    Two definitions SQLite would read the same way up to layout and letter case give the same
    tuple; a changed body, condition, table, column or message does not.
    """
    out: list[str] = []
    for token in _TOKEN.findall(sql or ""):
        if token.isspace() or token.startswith(("--", "/*")):
            continue
        first = token[0]
        if first == "'":
            out.append(token)  # a string literal: exact
        elif first in '"`[':
            out.append(token[1:-1].replace(first * 2, first).casefold())
        else:
            out.append(token.casefold())
    if out[2:5] == ["if", "not", "exists"]:  # CREATE TABLE IF NOT EXISTS …: the same object
        del out[2:5]
    return tuple(out)


@dataclass(frozen=True)
class SchemaObject:
    """One table, index, trigger or view as sqlite_master describes it."""

    type: str
    name: str
    table: str
    sql: str | None

    @property
    def key(self) -> tuple[str, tuple[str, ...]]:
        return (self.table.casefold(), normalise_sql(self.sql))


@dataclass(frozen=True)
class Finding:
    """One difference between a file's structure and the one the schema creates.

    ``kind`` is ``triggers-missing``, ``trigger-altered``, ``table-missing``, ``table-altered``,
    ``index-missing``, ``index-altered`` or
    ``unexpected-object``; ``name`` is the object's name.
    """

    kind: str
    name: str
    message: str

    @property
    def breaks_reading(self) -> bool:
        """True when a table the ledger reads is gone or changed (every command refuses)."""
        return self.kind in ("table-missing", "table-altered")


def file_objects(conn: sqlite3.Connection) -> dict[tuple[str, str], SchemaObject]:
    """Every table, index, trigger and view of the file by (type, name), SQLite's own left out.

    Names starting with ``sqlite_`` are reserved by SQLite for its internal tables and
    automatic indexes (SQLite, "The Schema Table", https://www.sqlite.org/schematab.html);
    a trigger cannot take such a name, so every trigger is kept.
    """
    rows = conn.execute("SELECT type, name, tbl_name, sql FROM sqlite_master").fetchall()
    return {
        (str(t), str(n)): SchemaObject(str(t), str(n), str(tb), s)
        for t, n, tb, s in rows
        if t == "trigger" or not str(n).startswith("sqlite_")
    }


@functools.cache
def expected_objects(version: int = SCHEMA_VERSION) -> dict[tuple[str, str], SchemaObject]:
    """The structure the migrations up to ``version`` create, read back from a database built
    in memory by the same code (so the comparison needs no second copy of the schema)."""
    conn = sqlite3.connect(":memory:", isolation_level=None)
    try:
        conn.execute("BEGIN")
        migrate(conn, target=version)
        conn.execute("COMMIT")
        return file_objects(conn)
    finally:
        conn.close()


def _columns(conn: sqlite3.Connection, table: str) -> list[str]:
    return [str(r[1]) for r in conn.execute("SELECT * FROM pragma_table_info(?)", (table,))]


def _table_change(
    conn: sqlite3.Connection, name: str, expected: SchemaObject, found: SchemaObject
) -> str:
    if found.type != "table":
        return f"the table {name} was altered: it is now a {found.type}"
    want = _columns_of(expected)
    have = _columns(conn, name)
    missing = [c for c in want if c not in have]
    extra = [c for c in have if c not in want]
    parts = []
    if missing:
        parts.append(f"column(s) {', '.join(missing)} missing")
    if extra:
        parts.append(f"column(s) {', '.join(extra)} not in the schema")
    if not parts:
        parts.append("its columns are named as expected but their types or constraints changed")
    return f"the table {name} was altered: {'; '.join(parts)}"


@functools.cache
def _columns_of(expected: SchemaObject) -> tuple[str, ...]:
    conn = sqlite3.connect(":memory:")
    try:
        conn.execute(str(expected.sql))
        return tuple(_columns(conn, expected.name))
    finally:
        conn.close()


def structure_findings(conn: sqlite3.Connection, version: int) -> list[Finding]:
    """Every way the file's tables, indexes and triggers differ from what migrations
    1…``version`` create, each named (an empty list: the structure is exactly the schema's).

    The append-only triggers must exist *and* read the same as the schema's definitions: a
    same-named trigger that does nothing, fires only ``WHEN 0``, or sits on another table is
    reported as altered. Any trigger, table or view the schema does not create is reported
    too (an extra trigger runs its own SQL on every append).
    """
    expected = expected_objects(version)
    found = file_objects(conn)
    by_name = {name: obj for (_, name), obj in found.items()}
    findings: list[Finding] = []
    missing_triggers = []
    for (kind, name), want in expected.items():
        have = found.get((kind, name))
        if have is None:
            other = by_name.get(name)
            if kind == "trigger":
                missing_triggers.append(name)
            elif other is not None and kind == "table":
                findings.append(
                    Finding("table-altered", name, _table_change(conn, name, want, other))
                )
            else:
                findings.append(
                    Finding(f"{kind}-missing", name, f"the {kind} {name} was removed from the file")
                )
            continue
        if (have.table, have.sql) == (want.table, want.sql) or have.key == want.key:
            continue  # (the same text needs no tokenising)
        if kind == "trigger":
            message = (
                f"the append-only trigger {name} was replaced by a different definition "
                f"(found: {' '.join((have.sql or '').split())[:200]})"
            )
        elif kind == "table":
            message = _table_change(conn, name, want, have)
        else:
            message = f"the {kind} {name} was replaced by a different definition"
        findings.append(Finding(f"{kind}-altered", name, message))
    if missing_triggers:
        findings.insert(
            0,
            Finding(
                "triggers-missing",
                ", ".join(missing_triggers),
                f"the append-only triggers {', '.join(missing_triggers)} were removed from the "
                "file",
            ),
        )
    for (kind, name), have in found.items():
        if (kind, name) in expected or (kind != "trigger" and name in _names(expected)):
            continue
        findings.append(
            Finding(
                "unexpected-object",
                name,
                f"a {kind} {name} (on {have.table}) that closecall does not create is in the file",
            )
        )
    return findings


def _names(objects: dict[tuple[str, str], SchemaObject]) -> set[str]:
    return {name for _, name in objects}
