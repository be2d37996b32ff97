"""Reading a WAL ledger from a login that may read its files but not write their folder.

An analyst outside the writers' group (docs/team.md, "Analysts") has read permission on the
ledger and its ``-wal``/``-shm`` companions and no write permission anywhere in the study.
SQLite opens such a file read-only as long as the companions exist (it then keeps the WAL index
in its own memory); when no writer has the ledger open, the last one to close has folded the WAL
into the file and removed both companions, and a read-only connection, which may not create
them, is refused ("attempt to write a readonly database").

Then the file is *at rest*: it is the whole ledger. :func:`reader_connection` reads it into
memory and serves the reads from that copy, but only a copy it can prove consistent: the
companions were absent before and after the read and the file's size, inode and modification
time did not change while it was read (a writer that starts meanwhile writes a ``-wal`` first,
and anything it folds back into the file changes the file). Otherwise it tries again, the
usual way first. The copy is never written back: a reader cannot alter anything.

References
----------
SQLite, "Write-Ahead Logging", section "Read-Only Databases", https://www.sqlite.org/wal.html
(a read-only WAL database opens when its -shm and -wal files exist); SQLite, "Database File
Format", section 1.3.3, https://www.sqlite.org/fileformat2.html (header bytes 18-19: 2 means
WAL, 1 the rollback journal).
"""

from __future__ import annotations

import os
import sqlite3
import time
from collections.abc import Callable
from pathlib import Path

#: Header bytes 18 and 19 (file format write and read versions): 1 legacy, 2 WAL.
_FORMAT_BYTES = slice(18, 20)


def may_write_folder(path: Path) -> bool:
    """Whether this process may create files beside ``path`` (SQLite's companions)."""
    return os.access(path.parent, os.W_OK | os.X_OK)


def _fingerprint(path: Path) -> tuple[int, int, int, int] | None:
    try:
        st = path.stat()
    except FileNotFoundError:
        return None
    return (st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns)


def _companions(path: Path) -> bool:
    return any(Path(f"{path}{s}").exists() for s in ("-wal", "-shm", "-journal"))


def copy_at_rest(path: Path) -> sqlite3.Connection | None:
    """An in-memory copy of the ledger at ``path`` if it is at rest and was read unchanged;
    None when a writer was (or came) at work meanwhile."""
    if _companions(path):
        return None
    before = _fingerprint(path)
    data = bytearray(path.read_bytes())
    if _companions(path) or _fingerprint(path) != before or before is None:
        return None
    if len(data) >= 100 and data[_FORMAT_BYTES] == b"\x02\x02":
        data[_FORMAT_BYTES] = b"\x01\x01"  # a memory copy has no WAL: read it as a whole file
    conn = sqlite3.connect(":memory:", isolation_level=None)
    try:
        conn.deserialize(bytes(data))
    except sqlite3.DatabaseError:
        conn.close()
        raise
    return conn


def reader_connection(
    path: Path, connect: Callable[[], sqlite3.Connection], timeout: float
) -> sqlite3.Connection:
    """A read-only connection to the ledger at ``path`` for a login that cannot write beside it.

    ``connect`` opens it read-only the usual way (it works while the WAL companions exist);
    when SQLite refuses that for want of write access, a consistent copy of the file at rest is
    read instead (:func:`copy_at_rest`). Tries for ``timeout`` seconds, then raises the last
    SQLite error.
    """
    deadline = time.monotonic() + timeout
    while True:
        conn = connect()
        try:
            conn.execute("SELECT COUNT(*) FROM sqlite_master").fetchone()
            return conn
        except sqlite3.OperationalError:
            conn.close()
            copy = copy_at_rest(path)
            if copy is not None:
                return copy
            if time.monotonic() > deadline:
                raise
            time.sleep(0.02)
