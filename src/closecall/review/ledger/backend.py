"""Which ledger a config's ``[review] ledger`` value names: an SQLite file or a PostgreSQL
database (a ``postgresql://`` URL or a libpq conninfo string), and the one interface both give.

The engine opens a study's ledger only through :func:`open_any_ledger` and asks whether there
is one with :func:`ledger_present`; nothing else assumes the ledger is a file.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any, Protocol

from closecall.review.ledger.entry import Entry, EntryContent
from closecall.review.ledger.pg_store import PgLedger, is_url, open_pg_ledger, verify_database
from closecall.review.ledger.store import Ledger
from closecall.review.ledger.store import open_ledger as open_sqlite_ledger
from closecall.review.ledger.verify import VerifyResult, verify_file

#: An open ledger of either kind (the same reading, appending, drafts and claims methods).
AnyLedger = Ledger | PgLedger


class LedgerBackend(Protocol):
    """What the engine uses of an open ledger, whichever engine stores it."""

    readonly: bool

    def append(self, content: EntryContent) -> Entry: ...
    def entries(
        self,
        *,
        case_id: str | None = None,
        reviewer: str | None = None,
        limit: int | None = None,
        before: int | None = None,
    ) -> list[Entry]: ...
    def entry(self, seq: int) -> Entry | None: ...
    def iter_rows(self) -> Iterator[dict[str, Any]]: ...
    def count(self) -> int: ...
    def head(self) -> tuple[int, str]: ...
    def close(self) -> None: ...


def is_database(where: str | Path) -> bool:
    """True when ``where`` names a PostgreSQL database rather than a ledger file."""
    return not isinstance(where, Path) and is_url(where)


def ledger_present(where: str | Path) -> bool:
    """Whether there may be entries to read: the file exists, or (always) the database.

    A database's readiness and the reader's access are checked when it is opened.
    """
    return is_database(where) or Path(where).exists()


def open_any_ledger(
    where: str | Path, *, readonly: bool = False, inspect: bool = False
) -> AnyLedger:
    """Open the ledger ``where`` names: PostgreSQL for a URL or conninfo, else the file.

    For a database, opening checks the session user's role (reviewers to write, reviewers or
    analysts to read) unless ``inspect``; see :func:`.pg_store.open_pg_ledger` and
    :func:`.store.open_ledger`.
    """
    if is_database(where):
        return open_pg_ledger(str(where), readonly=readonly, inspect=inspect)
    return open_sqlite_ledger(where, readonly=readonly, inspect=inspect)


def verify_any(
    where: str | Path,
    anchor: str | None = None,
    *,
    allow_empty: bool = False,
    keys: Mapping[str, str] | None = None,
) -> VerifyResult:
    """Verify the ledger ``where`` names, file (:func:`.verify.verify_file`) or database
    (:func:`.pg_store.verify_database`); never writes."""
    if is_database(where):
        return verify_database(str(where), anchor, allow_empty=allow_empty, keys=keys)
    return verify_file(where, anchor, allow_empty=allow_empty, keys=keys)
