"""A team's ledger in PostgreSQL from Python: prepare the database, move a ledger into it.

``closecall ledger setup`` and ``closecall ledger migrate`` are thin views over these functions
(docs/ledger.md). URLs name no password (libpq finds it in ``~/.pgpass`` or the environment);
results show them with any password hidden.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

from closecall.core.errors import UserError
from closecall.review.ledger.pg_store import ANALYST_ROLE, REVIEWER_ROLE, is_url, redact


@dataclass(frozen=True)
class LedgerDatabase:
    """A database prepared for a team's ledger.

    Attributes
    ----------
    url
        The database, password hidden.
    reviewer_role, analyst_role
        The group roles of those who record and of those who only read: grant one to each
        member (``GRANT closecall_reviewer TO alice``).
    """

    url: str
    reviewer_role: str
    analyst_role: str

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: ``url``, ``reviewer_role``, ``analyst_role``.

        Examples
        --------
        >>> LedgerDatabase("postgresql://db/reviews", "rev", "ro").to_dict()["reviewer_role"]
        'rev'
        """
        return asdict(self)


@dataclass(frozen=True)
class LedgerMigration:
    """A ledger copied into a PostgreSQL ledger, both chains verified and their heads equal.

    Attributes
    ----------
    source, target
        The ledger copied and the database it was copied into (password hidden).
    copied
        How many entries the target holds (all of the source's).
    head_seq, head_hash
        The head entry's sequence number and chain hash, the same on both sides.
    """

    source: str
    target: str
    copied: int
    head_seq: int
    head_hash: str

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: ``source``, ``target``, ``copied``, ``head_seq``, ``head_hash``.

        Examples
        --------
        >>> migrate_ledger("ledger.sqlite", "postgresql://db/reviews").to_dict()  # doctest: +SKIP
        """
        return asdict(self)


def _check_database_url(url: str, what: str) -> None:
    if not is_url(url):
        raise UserError(f"{url}: not a PostgreSQL URL", f"give the {what} as postgresql://HOST/DB")


def set_up_ledger_database(
    url: str, *, reviewer_role: str = REVIEWER_ROLE, analyst_role: str = ANALYST_ROLE
) -> LedgerDatabase:
    """Prepare a PostgreSQL database for a team's ledger: the schema, the append-only guards
    and the two group roles. Run once, by the database's owner (allowed to create roles);
    running it again is harmless and brings a database set up by an earlier closecall up to
    date.

    Examples
    --------
    >>> set_up_ledger_database("postgresql://owner@db.example/reviews").reviewer_role
    ... # doctest: +SKIP
    'closecall_reviewer'
    """
    from closecall.review.ledger.pg_store import setup

    _check_database_url(url, "database")
    setup(url, reviewer_role, analyst_role)
    return LedgerDatabase(redact(url), reviewer_role, analyst_role)


def migrate_ledger(source: str | Path, target: str) -> LedgerMigration:
    """Copy every entry of a ledger (a file, or another database) into an empty, set-up
    PostgreSQL ledger, exactly as stored; run by the target's owner.

    The source must verify before the copy and the copy after it, and both heads must be the
    same entry: otherwise ``UserError`` (a refused copy stores nothing).

    Examples
    --------
    >>> moved = migrate_ledger("ledger.sqlite", "postgresql://owner@db.example/reviews")
    ... # doctest: +SKIP
    >>> moved.copied, moved.head_hash  # doctest: +SKIP
    """
    from closecall.review.ledger.backend import open_any_ledger
    from closecall.review.ledger.pg_store import migrate, open_pg_ledger

    _check_database_url(target, "target")
    with open_any_ledger(source, readonly=True) as ledger:
        before = ledger.verify()
        if not before.ok:
            assert before.problem is not None
            raise UserError(
                f"{source}: the source ledger does not verify ({before.problem.message})",
                "run 'closecall ledger verify' on it and restore it from a backup first",
            )
        migrate(ledger, target)
    with open_pg_ledger(target, inspect=True) as copied:
        after = copied.verify()
    if not after.ok:
        assert after.problem is not None
        raise UserError(
            f"{redact(target)}: the copy does not verify ({after.problem.message})",
            "drop and set up the target database again, then migrate again",
        )
    if (before.head_seq, before.head_hash) != (after.head_seq, after.head_hash):
        raise UserError(
            f"the head hashes differ: {source} head {before.head_seq} {before.head_hash}, "
            f"{redact(target)} head {after.head_seq} {after.head_hash}",
            "tell the study's supervisor",
        )
    return LedgerMigration(
        str(source), redact(target), after.verified, after.head_seq, after.head_hash
    )
