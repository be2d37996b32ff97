"""Which ledger a config's ``[review] ledger`` value names: an SQLite file or a PostgreSQL
database (a ``postgresql://`` URL or a libpq conninfo string), and the one interface both give.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any, Protocol

from closecall.review.ledger.entry import Entry, EntryContent
from closecall.review.ledger.pg_store import is_url, open_pg_ledger
from closecall.review.ledger.store import open_ledger as open_sqlite_ledger


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


def open_any_ledger(where: str | Path, *, readonly: bool = False) -> Any:
    """Open the ledger ``where`` names: PostgreSQL for a URL or conninfo, else the file."""
    if is_url(where):
        return open_pg_ledger(str(where), readonly=readonly)
    return open_sqlite_ledger(where, readonly=readonly)
