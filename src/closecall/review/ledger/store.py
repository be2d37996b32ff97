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
import functools
import json
import math
import os
import sqlite3
import tempfile
import time
import urllib.parse
from collections.abc import Callable, Iterator, Mapping, Sequence
from pathlib import Path
from types import TracebackType
from typing import TYPE_CHECKING, Any, Concatenate, ParamSpec, TypeVar

from closecall.core.errors import UserError
from closecall.core.shared import file_mode
from closecall.core.vocabulary import ACTIONS
from closecall.review.ledger import schema
from closecall.review.ledger.damage import DamagedLedger, NoLedger
from closecall.review.ledger.drafts import Claims, Drafts, delete_draft, utc_iso, utc_now
from closecall.review.ledger.entry import (
    GENESIS_HASH,
    HASHED_FIELDS,
    Entry,
    EntryContent,
    canonical_json,
    entry_fields,
    entry_hash,
    signed_message,
)
from closecall.review.ledger.reader import may_write_folder, reader_connection

if TYPE_CHECKING:
    from closecall.review.ledger.chain import VerifyResult

#: Permissions of a new ledger file (and, by SQLite's rule, of its -wal and -shm files).
FILE_MODE = 0o660
#: How long a writer waits for another process's write lock before giving up.
BUSY_TIMEOUT_SECONDS = 60.0
#: Largest note accepted, in UTF-8 bytes.
MAX_NOTE_BYTES = 1_000_000

_COLUMNS = (*HASHED_FIELDS, "hash")
_SELECT = f"SELECT {', '.join(_COLUMNS)} FROM entries"
#: The same for a file older than schema 3 (opened read-only, not upgraded): no signatures.
_SELECT_V2 = (
    "SELECT " + ", ".join("NULL" if c == "signature" else c for c in _COLUMNS) + (" FROM entries")
)


class _UnreadableEntry(Exception):
    """A stored entry whose values cannot be read back (turned into DamagedLedger)."""

    def __init__(self, seq: object, reason: str) -> None:
        super().__init__(f"entry {seq}: {reason}")


def _row_to_entry(row: Sequence[Any]) -> Entry:
    values = dict(zip(_COLUMNS, row, strict=True))
    try:
        values["decisions"] = json.loads(values["decisions"])
    except (TypeError, ValueError) as exc:
        raise _UnreadableEntry(values.get("seq"), f"its decisions are not JSON ({exc})") from None
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
        # mkstemp gives 0600; the umask does not apply to fchmod (0664 in a study with readers)
        os.fchmod(fd, FILE_MODE | (file_mode() & 0o004))
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


NOT_A_LEDGER_FIX = (
    "check that [review] ledger in closecall.toml names the study's ledger file; if it does, "
    "the file was replaced: restore it from your latest backup and tell the study's supervisor"
)


def _permission(path: Path, text: str) -> UserError:
    """A ledger (or its -wal/-shm companion, or its folder) this login may not use: each
    named with owner, group and mode, and the command that fixes it."""
    from closecall.core.shared import describe, permission_error

    companions = [Path(f"{path}{s}") for s in ("-wal", "-shm")]
    blocked = [
        p
        for p in (path, *companions, path.parent)
        if p.exists() and not os.access(p, os.R_OK | os.W_OK | (os.X_OK if p.is_dir() else 0))
    ]
    if not blocked:
        return UserError(
            f"{path}: cannot open the ledger (SQLite says: {text})",
            "check that the file and its folder are readable and writable by your login "
            "(new ledgers are owner and group read/write only); if they are, run 'closecall "
            "ledger verify'",
        )
    first = permission_error(blocked[0], "write")
    others = "; ".join(describe(p) for p in blocked[1:])
    return UserError(
        f"{path}: the ledger cannot be written with your login (SQLite says: {text}): "
        + first.message.removeprefix("permission denied: ")
        + (f"; also {others}" if others else ""),
        first.fix,
    )


def _database_error(path: Path, exc: sqlite3.DatabaseError | _UnreadableEntry) -> UserError:
    """The one place where an SQLite error about the ledger becomes a message for the user.

    A file SQLite cannot read, or whose tables are not there, is a :class:`DamagedLedger`;
    a lock, missing permission or a full disk is a plain :class:`UserError` (nothing is wrong
    with the ledger itself).
    """
    text = str(exc)
    low = text.lower()
    if isinstance(exc, _UnreadableEntry):
        return DamagedLedger(
            path, f"a stored entry cannot be read back ({text})", kind="unreadable"
        )
    if path.is_dir():
        return DamagedLedger(
            path, "a folder, not a ledger file", kind="not-a-ledger", fix=NOT_A_LEDGER_FIX
        )
    if "not a database" in low or "encrypted" in low:
        return DamagedLedger(
            path,
            f"not a closecall ledger (SQLite says: {text})",
            kind="not-a-ledger",
            fix=NOT_A_LEDGER_FIX,
        )
    if "malformed" in low or "corrupt" in low:
        return DamagedLedger(
            path, f"the ledger file is damaged (SQLite says: {text})", kind="unreadable"
        )
    if "no such table" in low or "no such column" in low:
        return DamagedLedger(
            path,
            f"the ledger's tables were changed outside closecall (SQLite says: {text})",
            kind="structure",
        )
    if "locked" in low or "busy" in low:
        return UserError(
            f"{path}: the ledger is locked by another program (SQLite says: {text})",
            "wait for the other program to finish and run the command again; if it stays "
            "locked, close whatever holds the file open (an sqlite3 shell, a backup tool)",
        )
    if "readonly" in low or "read-only" in low or "unable to open" in low:
        return _permission(path, text)
    if "full" in low:
        return UserError(
            f"{path}: the disk holding the ledger is full (SQLite says: {text})",
            "free some space and run the command again (nothing was recorded)",
        )
    return UserError(
        f"{path}: cannot open the ledger (SQLite says: {text})",
        "check that the file and its folder are readable and writable by your login "
        "(new ledgers are owner and group read/write only); if they are, run 'closecall "
        "ledger verify'",
    )


_P = ParamSpec("_P")
_R = TypeVar("_R")


def _guarded(
    method: Callable[Concatenate[Ledger, _P], _R],
) -> Callable[Concatenate[Ledger, _P], _R]:
    """Turn SQLite errors raised while using an open ledger into one UserError."""

    @functools.wraps(method)
    def wrapper(self: Ledger, *args: _P.args, **kwargs: _P.kwargs) -> _R:
        try:
            return method(self, *args, **kwargs)
        except (sqlite3.DatabaseError, _UnreadableEntry) as exc:
            raise _database_error(self.path, exc) from None

    return wrapper


class Ledger:
    """An open ledger file. Use :func:`open_ledger`; close it (or use ``with``) when done."""

    def __init__(self, path: Path, conn: sqlite3.Connection, readonly: bool) -> None:
        self.path = path
        self.readonly = readonly
        self._conn = conn
        columns = {str(r[1]) for r in conn.execute("SELECT * FROM pragma_table_info('entries')")}
        self._select = _SELECT if "signature" in columns or not columns else _SELECT_V2
        #: Drafts and soft claims: mutable, outside the chain (:mod:`.drafts`).
        self.drafts = Drafts(path, conn, self._write, _database_error)
        self.claims = Claims(path, conn, self._write, _database_error)

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

    @_guarded
    def append(self, content: EntryContent, sign: Callable[[bytes], str] | None = None) -> Entry:
        """Number, chain and store one entry; removes the reviewer's draft for the case.

        The write lock is taken before the last hash is read, so concurrent writers queue up
        and each links to the entry committed just before it. ``sign`` (the author's key, see
        :mod:`closecall.review.ledger.signing`) signs the entry's
        :func:`~closecall.review.ledger.entry.signed_message` inside that lock; without it the
        entry is stored unsigned.
        """
        _check_content(content)
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
            fields = entry_fields(
                content,
                seq=seq,
                time=utc_iso(utc_now()),
                reviewer=content.reviewer,
                prev_hash=prev_hash,
            )
            fields["signature"] = sign(signed_message(fields)) if sign is not None else None
            fields["hash"] = entry_hash(fields)
            row = {**fields, "decisions": canonical_json(fields["decisions"]).decode("utf-8")}
            conn.execute(
                f"INSERT INTO entries ({', '.join(_COLUMNS)}) "
                f"VALUES ({', '.join('?' for _ in _COLUMNS)})",
                [row[c] for c in _COLUMNS],
            )
            delete_draft(conn, content.reviewer, content.case_id)
        return Entry(**fields)

    @_guarded
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
        sql = (
            self._select + (f" WHERE {' AND '.join(where)}" if where else "") + " ORDER BY seq DESC"
        )
        if limit is not None:
            sql += " LIMIT ?"
            params.append(str(int(limit)))
        rows = self._conn.execute(sql, params).fetchall()
        return [_row_to_entry(r) for r in reversed(rows)]

    @_guarded
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

    @_guarded
    def entry(self, seq: int) -> Entry | None:
        row = self._conn.execute(self._select + " WHERE seq = ?", (seq,)).fetchone()
        return _row_to_entry(row) if row else None

    def iter_rows(self) -> Iterator[dict[str, Any]]:
        """Every stored row as raw column values, in sequence order (for verification)."""
        try:
            for row in self._conn.execute(self._select + " ORDER BY seq"):
                yield dict(zip(_COLUMNS, row, strict=True))
        except sqlite3.DatabaseError as exc:
            raise _database_error(self.path, exc) from None

    @_guarded
    def count(self) -> int:
        return int(self._conn.execute("SELECT COUNT(*) FROM entries").fetchone()[0])

    @_guarded
    def head(self) -> tuple[int, str]:
        """(sequence number, hash) of the last stored entry; (0, GENESIS_HASH) when empty."""
        row = self._conn.execute(
            "SELECT seq, hash FROM entries ORDER BY seq DESC LIMIT 1"
        ).fetchone()
        return (int(row[0]), str(row[1])) if row else (0, GENESIS_HASH)

    def missing_triggers(self) -> list[str]:
        return schema.missing_triggers(self._conn)

    @_guarded
    def structure_findings(self) -> list[schema.Finding]:
        """How the file's tables, indexes and triggers differ from the schema's (see
        :func:`closecall.review.ledger.schema.structure_findings`); empty when they are the same."""
        return _structure(self._conn)

    def require_intact(self) -> None:
        """DamagedLedger unless the structure is exactly the schema's (what writers need)."""
        _refuse(self.path, self.structure_findings())

    def verify(
        self, anchor: str | None = None, keys: Mapping[str, str] | None = None
    ) -> VerifyResult:
        """Recompute the chain (and check signatures against ``keys``); see
        :func:`closecall.review.ledger.verify.verify_chain`."""
        from closecall.review.ledger.chain import verify_chain

        return verify_chain(self, anchor, keys)


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

        def connect() -> sqlite3.Connection:
            return sqlite3.connect(
                uri, uri=True, timeout=BUSY_TIMEOUT_SECONDS, isolation_level=None
            )

        if may_write_folder(path):
            conn = connect()
        else:  # an analyst outside the writers' group (docs/team.md, "Analysts")
            conn = reader_connection(path, connect, BUSY_TIMEOUT_SECONDS)
    else:
        conn = sqlite3.connect(path, timeout=BUSY_TIMEOUT_SECONDS, isolation_level=None)
    conn.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_SECONDS * 1000)}")
    return conn


def open_ledger(path: str | Path, *, readonly: bool = False, inspect: bool = False) -> Ledger:
    """Open (and, unless ``readonly``, create or upgrade) the ledger at ``path``.

    A read never creates the file. The file's structure is checked first: a reader refuses a
    ledger whose tables were dropped or altered, a writer also one whose triggers or other
    objects differ from the schema's, and neither writes to a ledger it refuses.

    Parameters
    ----------
    path
        The ledger file.
    readonly
        Open for reading only (never creates, upgrades or writes anything).
    inspect
        Read-only, and open a ledger whose structure differs from the schema's anyway, so that
        ``ledger verify`` can name every difference (:meth:`Ledger.structure_findings`).

    Raises
    ------
    NoLedger
        In read-only mode, when the file does not exist or holds no tables.
    DamagedLedger
        The path holds a folder, a file that is not a closecall ledger, or a ledger whose
        structure was changed outside closecall; or (writers) an empty file.
    UserError
        The file cannot be opened (permissions, a lock held too long) or was written by a
        newer closecall.
    """
    path = Path(path)
    readonly = readonly or inspect
    if path.is_dir():
        raise DamagedLedger(
            path, "a folder, not a ledger file", kind="not-a-ledger", fix=NOT_A_LEDGER_FIX
        )
    if readonly and not path.exists():
        raise NoLedger(f"{path}: no ledger yet", "record a review first with 'closecall record'")
    try:
        if not readonly:
            _create_file(path)
        conn = _connect(path, readonly)
    except sqlite3.DatabaseError as exc:
        raise _database_error(path, exc) from None
    except OSError as exc:
        raise UserError(f"{path}: cannot create the ledger ({exc.strerror})") from None
    deadline = time.monotonic() + BUSY_TIMEOUT_SECONDS
    while True:
        try:
            _prepare(conn, path, readonly, inspect)
            break
        except sqlite3.OperationalError as exc:
            # Some lock waits (a journal-mode change, WAL recovery after a crash) return
            # "locked" without going through the busy timeout: wait and try again.
            if "locked" in str(exc) and time.monotonic() < deadline:
                time.sleep(0.01)
                continue
            conn.close()
            raise _database_error(path, exc) from None
        except sqlite3.DatabaseError as exc:
            conn.close()
            raise _database_error(path, exc) from None
        except BaseException:
            conn.close()
            raise
    return Ledger(path, conn, readonly)


def _prepare(conn: sqlite3.Connection, path: Path, readonly: bool, inspect: bool) -> None:
    """Check what the file is before anything is written to it; then WAL and migrations."""
    conn.execute("PRAGMA synchronous = FULL")
    objects = schema.file_objects(conn)  # the first read: a file that is not SQLite fails here
    if not objects:
        size = path.stat().st_size
        if readonly:
            raise NoLedger(
                f"{path}: empty ledger file ({size} bytes, no tables)",
                "record a review first with 'closecall record'",
            )
        raise DamagedLedger(
            path,
            f"the ledger file holds no tables ({size} bytes); closecall creates a ledger "
            "complete in one step, so this file was emptied or made by hand",
            kind="empty-ledger",
            fix="restore the ledger from your latest backup; if the study has no reviews yet, "
            "delete the empty file and record again (closecall then creates the ledger)",
        )
    if not _is_ledger(conn, objects):
        raise DamagedLedger(
            path,
            "an SQLite file, but not a closecall ledger",
            kind="not-a-ledger",
            fix=NOT_A_LEDGER_FIX,
        )
    version = _read_version(conn, objects)
    if version is not None and version > schema.SCHEMA_VERSION:
        raise UserError(
            f"{path}: ledger schema version {version} is newer than this closecall understands "
            f"({schema.SCHEMA_VERSION})",
            "upgrade closecall",
        )
    findings = _structure(conn, objects, version)
    if not inspect:
        _refuse(path, [f for f in findings if f.breaks_reading or not readonly])
    if readonly:
        return  # an older version reads the same; upgraded by the next writer
    mode = conn.execute("PRAGMA journal_mode = WAL").fetchone()[0]
    if str(mode).lower() != "wal":
        raise UserError(
            f"{path}: SQLite could not switch the ledger to WAL mode (got {mode!r})",
            "keep the ledger on a local file system (WAL needs shared memory)",
        )
    if version is not None and version < schema.SCHEMA_VERSION:
        with _WriteTransaction(conn):
            schema.migrate(conn)  # re-reads the version under the write lock


def _refuse(path: Path, findings: Sequence[schema.Finding]) -> None:
    """DamagedLedger naming the first findings, if there are any."""
    if not findings:
        return
    shown = "; ".join(f.message for f in findings[:3])
    more = f" (and {len(findings) - 3} more)" if len(findings) > 3 else ""
    raise DamagedLedger(
        path,
        f"the ledger's structure was changed outside closecall: {shown}{more}",
        kind="structure",
        findings=findings,
    )


def _intact(objects: dict[tuple[str, str], schema.SchemaObject], table: str) -> bool:
    """The table is there with the definition some schema version gave it (columns are
    added by later versions, e.g. the entries' signature in version 3)."""
    have = objects.get(("table", table))
    if have is None:
        return False
    for version in range(1, schema.SCHEMA_VERSION + 1):
        want = schema.expected_objects(version).get(("table", table))
        if want is not None and (have.sql == want.sql or have.key == want.key):
            return True
    return False


def _marker(conn: sqlite3.Connection, objects: dict[tuple[str, str], schema.SchemaObject]) -> Any:
    """The meta table's application marker (None when the table or the row is missing)."""
    if not _intact(objects, "meta"):
        return None
    row = conn.execute("SELECT value FROM meta WHERE key = 'application'").fetchone()
    return None if row is None else row[0]


def _is_ledger(
    conn: sqlite3.Connection, objects: dict[tuple[str, str], schema.SchemaObject]
) -> bool:
    """closecall's marker, or (marker gone) the entries table exactly as closecall made it."""
    marker = _marker(conn, objects)
    if marker is not None:
        return bool(marker == schema.APPLICATION)
    return _intact(objects, "entries")


def _read_version(
    conn: sqlite3.Connection, objects: dict[tuple[str, str], schema.SchemaObject]
) -> int | None:
    """The schema version, or None when the schema_version table is missing, altered or holds
    no valid version (reported by :func:`_structure`)."""
    if not _intact(objects, "schema_version"):
        return None
    value = conn.execute("SELECT MAX(version) FROM schema_version").fetchone()[0]
    return value if isinstance(value, int) and value >= 1 else None


def _structure(
    conn: sqlite3.Connection,
    objects: dict[tuple[str, str], schema.SchemaObject] | None = None,
    version: int | None = None,
) -> list[schema.Finding]:
    """Structure findings of the file against the schema of its own version."""
    if objects is None:
        objects = schema.file_objects(conn)
        version = _read_version(conn, objects)
    valid = version is not None and version <= schema.SCHEMA_VERSION
    findings = schema.structure_findings(
        conn, version if valid and version else schema.SCHEMA_VERSION
    )
    if version is None and _intact(objects, "schema_version"):
        findings.insert(
            0,
            schema.Finding(
                "table-altered",
                "schema_version",
                "the table schema_version holds no valid version (its rows were changed)",
            ),
        )
    if _intact(objects, "meta") and _marker(conn, objects) is None:
        findings.append(
            schema.Finding("table-altered", "meta", "the table meta lost closecall's marker row")
        )
    return findings
