"""The ledger file: an SQLite database in WAL mode, append-only, hash-chained.

Durability and concurrency come from SQLite itself: every append is one transaction, taken with
``BEGIN IMMEDIATE`` (the write lock) *before* the last hash is read, committed with
``synchronous=FULL`` so a committed entry survives a crash or power loss, and a process killed
mid-append leaves no trace of the unfinished entry. Writers in other processes wait on the lock
(busy timeout) instead of failing.

References
----------
SQLite, "Write-Ahead Logging", https://www.sqlite.org/wal.html
SQLite, "Atomic Commit In SQLite", https://www.sqlite.org/atomiccommit.html
SQLite, "PRAGMA synchronous", https://www.sqlite.org/pragma.html#pragma_synchronous
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import sqlite3
import tempfile
import time
import urllib.parse
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path
from types import TracebackType
from typing import TYPE_CHECKING, Any

from closecall.errors import UserError
from closecall.ledger import schema
from closecall.ledger.entry import (
    ACTIONS,
    ENTRY_FORMAT,
    GENESIS_HASH,
    HASHED_FIELDS,
    Entry,
    EntryContent,
    canonical_json,
    entry_hash,
)

if TYPE_CHECKING:
    from closecall.ledger.verify import VerifyResult

#: Permissions of a new ledger file (and, by SQLite's rule, of its -wal and -shm files).
FILE_MODE = 0o660
#: How long a writer waits for another process's write lock before giving up.
BUSY_TIMEOUT_SECONDS = 60.0
#: Largest note accepted, in UTF-8 bytes.
MAX_NOTE_BYTES = 1_000_000

_COLUMNS = (*HASHED_FIELDS, "hash")
_SELECT = f"SELECT {', '.join(_COLUMNS)} FROM entries"


def utc_now() -> datetime:
    return datetime.now(UTC)


def utc_iso(moment: datetime) -> str:
    """ISO 8601 in UTC with microseconds and a Z; sorts as text in time order."""
    return moment.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


@dataclass(frozen=True)
class Draft:
    """A note being written for a case, kept outside the chain until it is recorded."""

    reviewer: str
    case_id: str
    note: str
    action: str | None
    reason: str | None
    updated: str


@dataclass(frozen=True)
class Claim:
    """A soft claim: ``reviewer`` has ``case_id`` open until ``expires_at`` (never blocks)."""

    case_id: str
    reviewer: str
    claimed_at: str
    expires_at: str


def _row_to_entry(row: Sequence[Any]) -> Entry:
    values = dict(zip(_COLUMNS, row, strict=True))
    values["decisions"] = json.loads(values["decisions"])
    return Entry(**values)


def _create_file(path: Path) -> None:
    """Create a complete, empty ledger at ``path`` in one atomic step, with FILE_MODE.

    The new database is built beside it under a temporary name (mode set before SQLite writes
    a byte), switched to WAL, given its schema, closed, and then hard-linked into place. So no
    process ever sees a half-made ledger, and when several processes create it at once the
    first link wins and the others use that file.
    """
    path.parent.mkdir(parents=True, exist_ok=True)
    if path.exists():
        return
    fd, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".new", dir=path.parent)
    tmp = Path(name)
    try:
        os.fchmod(fd, FILE_MODE)  # mkstemp gives 0600; the umask does not apply to fchmod
        os.close(fd)
        conn = sqlite3.connect(tmp, isolation_level=None)
        try:
            conn.execute("PRAGMA journal_mode = WAL")
            conn.execute("PRAGMA synchronous = FULL")
            with _WriteTransaction(conn):
                schema.migrate(conn)
        finally:
            conn.close()
        try:
            os.link(tmp, path)
        except FileExistsError:  # another process created it first: theirs stands
            return
        except OSError:  # no hard links on this file system: rename, if still absent
            if path.exists():
                return
            os.rename(tmp, path)
        dir_fd = os.open(path.parent, os.O_RDONLY)
        try:
            os.fsync(dir_fd)  # make the new name durable
        finally:
            os.close(dir_fd)
    finally:
        for suffix in ("", "-wal", "-shm", "-journal"):
            with contextlib.suppress(FileNotFoundError):
                os.unlink(f"{tmp}{suffix}")


def _check_content(content: EntryContent) -> None:
    """Invariants every entry must meet; the engine reports user errors before this."""
    if content.action not in ACTIONS:
        raise ValueError(f"unknown action {content.action!r}")
    for name in ("reviewer", "case_id", "snapshot_id", "reference_model", "note"):
        value = getattr(content, name)
        if not isinstance(value, str):
            raise ValueError(f"{name} must be text, got {type(value).__name__}")
        value.encode("utf-8")  # raises on lone surrogates (undecodable command-line bytes)
    if content.reason is not None:
        content.reason.encode("utf-8")
    if len(content.note.encode("utf-8")) > MAX_NOTE_BYTES:
        raise ValueError(f"note longer than {MAX_NOTE_BYTES} bytes")
    if content.reference_margin is not None and not math.isfinite(content.reference_margin):
        raise ValueError("reference_margin must be finite or None")
    canonical_json(content.decisions)  # raises on NaN or non-JSON values


class NoLedger(UserError):
    """Read-only open of a ledger that does not exist yet (or holds nothing)."""


class Ledger:
    """An open ledger file. Use :func:`open_ledger`; close it (or use ``with``) when done."""

    def __init__(self, path: Path, conn: sqlite3.Connection, readonly: bool) -> None:
        self.path = path
        self.readonly = readonly
        self._conn = conn

    # ------------------------------------------------------------------ lifecycle

    def close(self) -> None:
        self._conn.close()

    def __enter__(self) -> Ledger:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()

    @property
    def connection(self) -> sqlite3.Connection:
        """The raw SQLite connection (for tests and maintenance tools)."""
        return self._conn

    def _write(self) -> _WriteTransaction:
        if self.readonly:
            raise RuntimeError("ledger opened read-only")
        return _WriteTransaction(self._conn)

    # ------------------------------------------------------------------ entries

    def append(self, content: EntryContent) -> Entry:
        """Number, chain and store one entry; removes the reviewer's draft for the case.

        The write lock is taken before the last hash is read, so concurrent writers queue up
        and each links to the entry committed just before it.
        """
        _check_content(content)
        decisions = json.loads(canonical_json(content.decisions))  # plain JSON types only
        with self._write() as conn:
            last = conn.execute(
                "SELECT seq, hash FROM entries ORDER BY seq DESC LIMIT 1"
            ).fetchone()
            seq, prev_hash = (int(last[0]) + 1, str(last[1])) if last else (1, GENESIS_HASH)
            if content.supersedes is not None:
                earlier = conn.execute(
                    "SELECT case_id FROM entries WHERE seq = ?", (content.supersedes,)
                ).fetchone()
                if earlier is None or earlier[0] != content.case_id:
                    raise ValueError(
                        f"entry {content.supersedes} is not an earlier entry for {content.case_id}"
                    )
            fields: dict[str, Any] = {
                "seq": seq,
                "format": ENTRY_FORMAT,
                "time": utc_iso(utc_now()),
                "reviewer": content.reviewer,
                "case_id": content.case_id,
                "snapshot_id": content.snapshot_id,
                "current_snapshot_id": content.current_snapshot_id,
                "reference_model": content.reference_model,
                "reference_decision": content.reference_decision,
                "reference_margin": (
                    None if content.reference_margin is None else float(content.reference_margin)
                ),
                "decisions": decisions,
                "action": content.action,
                "reason": content.reason,
                "note": content.note,
                "supersedes": content.supersedes,
                "prev_hash": prev_hash,
            }
            fields["hash"] = entry_hash(fields)
            row = {**fields, "decisions": canonical_json(decisions).decode("utf-8")}
            conn.execute(
                f"INSERT INTO entries ({', '.join(_COLUMNS)}) "
                f"VALUES ({', '.join('?' for _ in _COLUMNS)})",
                [row[c] for c in _COLUMNS],
            )
            conn.execute(
                "DELETE FROM drafts WHERE reviewer = ? AND case_id = ?",
                (content.reviewer, content.case_id),
            )
        return Entry(**fields)

    def entries(
        self,
        *,
        case_id: str | None = None,
        reviewer: str | None = None,
        limit: int | None = None,
        before: int | None = None,
    ) -> list[Entry]:
        """Entries in sequence order; with ``limit``, the most recent ``limit`` of them.

        With ``before``, only entries whose sequence number is below it (one page further
        back: pass the smallest ``seq`` of the page shown). An indexed range read, so a page
        costs the same at any depth of the ledger.
        """
        where, params = [], []
        if before is not None:
            where.append("seq < ?")
            params.append(str(int(before)))
        if case_id is not None:
            where.append("case_id = ?")
            params.append(case_id)
        if reviewer is not None:
            where.append("reviewer = ?")
            params.append(reviewer)
        sql = _SELECT + (f" WHERE {' AND '.join(where)}" if where else "") + " ORDER BY seq DESC"
        if limit is not None:
            sql += " LIMIT ?"
            params.append(str(int(limit)))
        rows = self._conn.execute(sql, params).fetchall()
        return [_row_to_entry(r) for r in reversed(rows)]

    def latest_actions(self) -> list[tuple[str, str]]:
        """(case_id, action) of each case's latest entry, in one indexed query.

        The review screen's states need only this; reading every entry as an ``Entry`` would
        grow with the ledger.
        """
        rows = self._conn.execute(
            "SELECT e.case_id, e.action FROM entries AS e JOIN "
            "(SELECT case_id, MAX(seq) AS last FROM entries GROUP BY case_id) AS m "
            "ON e.seq = m.last ORDER BY e.seq"
        ).fetchall()
        return [(str(r[0]), str(r[1])) for r in rows]

    def entry(self, seq: int) -> Entry | None:
        row = self._conn.execute(_SELECT + " WHERE seq = ?", (seq,)).fetchone()
        return _row_to_entry(row) if row else None

    def iter_rows(self) -> Iterator[dict[str, Any]]:
        """Every stored row as raw column values, in sequence order (for verification)."""
        for row in self._conn.execute(_SELECT + " ORDER BY seq"):
            yield dict(zip(_COLUMNS, row, strict=True))

    def count(self) -> int:
        return int(self._conn.execute("SELECT COUNT(*) FROM entries").fetchone()[0])

    def head(self) -> tuple[int, str]:
        """(sequence number, hash) of the last stored entry; (0, GENESIS_HASH) when empty."""
        row = self._conn.execute(
            "SELECT seq, hash FROM entries ORDER BY seq DESC LIMIT 1"
        ).fetchone()
        return (int(row[0]), str(row[1])) if row else (0, GENESIS_HASH)

    def missing_triggers(self) -> list[str]:
        return schema.missing_triggers(self._conn)

    def verify(self, anchor: str | None = None) -> VerifyResult:
        """Recompute the chain; see :func:`closecall.ledger.verify.verify_chain`."""
        from closecall.ledger.verify import verify_chain

        return verify_chain(self, anchor)

    # ------------------------------------------------------------------ drafts

    def save_draft(
        self, reviewer: str, case_id: str, note: str, action: str | None, reason: str | None
    ) -> Draft:
        draft = Draft(reviewer, case_id, note, action, reason, utc_iso(utc_now()))
        with self._write() as conn:
            conn.execute(
                "INSERT INTO drafts (reviewer, case_id, action, reason, note, updated) "
                "VALUES (?, ?, ?, ?, ?, ?) ON CONFLICT (reviewer, case_id) DO UPDATE SET "
                "action = excluded.action, reason = excluded.reason, note = excluded.note, "
                "updated = excluded.updated",
                (reviewer, case_id, action, reason, note, draft.updated),
            )
        return draft

    def load_draft(self, reviewer: str, case_id: str) -> Draft | None:
        if not _has_table(self._conn, "drafts"):  # an older file opened read-only
            return None
        row = self._conn.execute(
            "SELECT reviewer, case_id, note, action, reason, updated FROM drafts "
            "WHERE reviewer = ? AND case_id = ?",
            (reviewer, case_id),
        ).fetchone()
        return Draft(*row) if row else None

    def drafts_of(self, reviewer: str) -> list[Draft]:
        """Every draft ``reviewer`` has saved, most recently updated first."""
        if not _has_table(self._conn, "drafts"):  # an older file opened read-only
            return []
        rows = self._conn.execute(
            "SELECT reviewer, case_id, note, action, reason, updated FROM drafts "
            "WHERE reviewer = ? ORDER BY updated DESC, case_id",
            (reviewer,),
        ).fetchall()
        return [Draft(*row) for row in rows]

    def drop_draft(self, reviewer: str, case_id: str) -> None:
        with self._write() as conn:
            conn.execute(
                "DELETE FROM drafts WHERE reviewer = ? AND case_id = ?", (reviewer, case_id)
            )

    # ------------------------------------------------------------------ soft claims

    def claim(self, case_id: str, reviewer: str, minutes: float) -> Claim:
        """Mark ``case_id`` as open by ``reviewer`` for ``minutes``; renews an existing claim."""
        now = utc_now()
        claim = Claim(case_id, reviewer, utc_iso(now), utc_iso(now + timedelta(minutes=minutes)))
        with self._write() as conn:
            conn.execute("DELETE FROM claims WHERE expires_at <= ?", (claim.claimed_at,))
            conn.execute(
                "INSERT INTO claims (case_id, reviewer, claimed_at, expires_at) VALUES (?, ?, ?, ?)"
                " ON CONFLICT (case_id, reviewer) DO UPDATE SET "
                "claimed_at = excluded.claimed_at, expires_at = excluded.expires_at",
                (claim.case_id, claim.reviewer, claim.claimed_at, claim.expires_at),
            )
        return claim

    def release(self, case_id: str, reviewer: str) -> None:
        with self._write() as conn:
            conn.execute(
                "DELETE FROM claims WHERE case_id = ? AND reviewer = ?", (case_id, reviewer)
            )

    def claims(self, case_ids: Iterable[str] | None = None) -> dict[str, list[Claim]]:
        """Unexpired claims by case (all cases when ``case_ids`` is None), oldest first."""
        if not _has_table(self._conn, "claims"):  # an older file opened read-only
            return {}
        now = utc_iso(utc_now())
        rows = self._conn.execute(
            "SELECT case_id, reviewer, claimed_at, expires_at FROM claims "
            "WHERE expires_at > ? ORDER BY claimed_at",
            (now,),
        ).fetchall()
        wanted = None if case_ids is None else set(case_ids)
        out: dict[str, list[Claim]] = {}
        for row in rows:
            if wanted is None or row[0] in wanted:
                out.setdefault(row[0], []).append(Claim(*row))
        return out


class _WriteTransaction:
    """``BEGIN IMMEDIATE`` … ``COMMIT``, rolled back on any exception."""

    def __init__(self, conn: sqlite3.Connection) -> None:
        self._conn = conn

    def __enter__(self) -> sqlite3.Connection:
        self._conn.execute("BEGIN IMMEDIATE")
        return self._conn

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        if exc_type is None:
            self._conn.execute("COMMIT")
        elif self._conn.in_transaction:
            self._conn.execute("ROLLBACK")


def _connect(path: Path, readonly: bool) -> sqlite3.Connection:
    if readonly:
        uri = "file:" + urllib.parse.quote(str(path.resolve())) + "?mode=ro"
        conn = sqlite3.connect(uri, uri=True, timeout=BUSY_TIMEOUT_SECONDS, isolation_level=None)
    else:
        conn = sqlite3.connect(path, timeout=BUSY_TIMEOUT_SECONDS, isolation_level=None)
    conn.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_SECONDS * 1000)}")
    return conn


def _sqlite_error(path: Path, exc: sqlite3.Error) -> UserError:
    text = str(exc)
    if "not a database" in text or "malformed" in text:
        return UserError(
            f"{path}: not a closecall ledger (SQLite says: {text})",
            "check [review] ledger in closecall.toml points at the study's ledger file",
        )
    return UserError(
        f"{path}: cannot open the ledger (SQLite says: {text})",
        "check that the file and its folder are readable and writable by your login "
        "(new ledgers are owner and group read/write only)",
    )


def open_ledger(path: str | Path, *, readonly: bool = False) -> Ledger:
    """Open (and, unless ``readonly``, create or upgrade) the ledger at ``path``.

    Raises
    ------
    UserError
        The file cannot be opened, is not a ledger, or was written by a newer closecall;
        in read-only mode also when it does not exist.
    """
    path = Path(path)
    if readonly and not path.exists():
        raise NoLedger(f"{path}: no ledger yet", "record a review first with 'closecall record'")
    try:
        if not readonly:
            _create_file(path)
        conn = _connect(path, readonly)
    except (OSError, sqlite3.Error) as exc:
        if isinstance(exc, sqlite3.Error):
            raise _sqlite_error(path, exc) from None
        raise UserError(f"{path}: cannot create the ledger ({exc.strerror})") from None
    deadline = time.monotonic() + BUSY_TIMEOUT_SECONDS
    while True:
        try:
            _prepare(conn, path, readonly)
            break
        except sqlite3.OperationalError as exc:
            # Some lock waits (a journal-mode change, WAL recovery after a crash) return
            # "locked" without going through the busy timeout: wait and try again.
            if "locked" in str(exc) and time.monotonic() < deadline:
                time.sleep(0.01)
                continue
            conn.close()
            raise _sqlite_error(path, exc) from None
        except sqlite3.Error as exc:
            conn.close()
            raise _sqlite_error(path, exc) from None
        except BaseException:
            conn.close()
            raise
    return Ledger(path, conn, readonly)


def _prepare(conn: sqlite3.Connection, path: Path, readonly: bool) -> None:
    if not readonly:
        mode = conn.execute("PRAGMA journal_mode = WAL").fetchone()[0]
        if str(mode).lower() != "wal":
            raise UserError(
                f"{path}: SQLite could not switch the ledger to WAL mode (got {mode!r})",
                "keep the ledger on a local file system (WAL needs shared memory)",
            )
    conn.execute("PRAGMA synchronous = FULL")
    if not schema.is_empty(conn):
        marker = (
            conn.execute("SELECT value FROM meta WHERE key = 'application'").fetchone()
            if _has_table(conn, "meta")
            else None
        )
        if marker is None or marker[0] != schema.APPLICATION:
            raise UserError(
                f"{path}: an SQLite file, but not a closecall ledger",
                "point [review] ledger in closecall.toml at a new or existing ledger file",
            )
    version = schema.schema_version(conn)
    if version > schema.SCHEMA_VERSION:
        raise UserError(
            f"{path}: ledger schema version {version} is newer than this closecall understands "
            f"({schema.SCHEMA_VERSION})",
            "upgrade closecall",
        )
    if version < schema.SCHEMA_VERSION:
        if readonly:
            if version == 0:
                raise NoLedger(f"{path}: empty ledger file", "record a review first")
            return  # entries read the same in every version; upgraded by the next writer
        with _WriteTransaction(conn):
            schema.migrate(conn)  # re-reads the version under the write lock


def _has_table(conn: sqlite3.Connection, name: str) -> bool:
    return (
        conn.execute(
            "SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = ?", (name,)
        ).fetchone()
        is not None
    )
