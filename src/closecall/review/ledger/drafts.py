"""Drafts and soft claims: the mutable side of the ledger file, kept apart from the chain.

The append-only, hash-chained entries live in :mod:`closecall.review.ledger.store`. Drafts (a
note being typed) and claims (advice that a reviewer has a case open) are rewritten and deleted
freely, are never hashed and never count as evidence; they share the ledger's SQLite file (tables
``drafts`` and ``claims``) and its write lock, nothing else.
"""

from __future__ import annotations

import functools
import sqlite3
from collections.abc import Callable, Iterable
from contextlib import AbstractContextManager
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Concatenate, ParamSpec, TypeVar

from closecall.core.errors import UserError

#: Opens one write transaction on the ledger's connection (``BEGIN IMMEDIATE`` … ``COMMIT``).
WriteFactory = Callable[[], AbstractContextManager[sqlite3.Connection]]
#: Turns an SQLite error on the ledger file into the ledger's one UserError.
ErrorFactory = Callable[[Path, sqlite3.DatabaseError], UserError]

_DRAFT_COLUMNS = "reviewer, case_id, note, action, reason, updated"


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
    """A soft claim: ``reviewer`` has ``case_id`` open until ``expires_at`` (never blocks).

    ``instance`` names the review screen (one running ``closecall review``) that took it, so
    one that exits releases its own claims only; None for a claim taken without one.
    """

    case_id: str
    reviewer: str
    claimed_at: str
    expires_at: str
    instance: str | None = None


def has_table(conn: sqlite3.Connection, name: str) -> bool:
    """Whether the file has table ``name`` (older, read-only files lack drafts and claims)."""
    row = conn.execute(
        "SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = ?", (name,)
    ).fetchone()
    return row is not None


def delete_draft(conn: sqlite3.Connection, reviewer: str, case_id: str) -> None:
    """Remove one draft inside a write transaction the caller holds (used by appends too)."""
    conn.execute("DELETE FROM drafts WHERE reviewer = ? AND case_id = ?", (reviewer, case_id))


_Self = TypeVar("_Self", bound="_MutableTable")
_P = ParamSpec("_P")
_R = TypeVar("_R")


def _guarded(
    method: Callable[Concatenate[_Self, _P], _R],
) -> Callable[Concatenate[_Self, _P], _R]:
    """Turn SQLite errors into the ledger's UserError."""

    @functools.wraps(method)
    def wrapper(self: _Self, *args: _P.args, **kwargs: _P.kwargs) -> _R:
        try:
            return method(self, *args, **kwargs)
        except sqlite3.DatabaseError as exc:
            raise self._on_error(self._path, exc) from None

    return wrapper


class _MutableTable:
    def __init__(
        self, path: Path, conn: sqlite3.Connection, write: WriteFactory, on_error: ErrorFactory
    ) -> None:
        self._path = path
        self._conn = conn
        self._write = write
        self._on_error = on_error


class Drafts(_MutableTable):
    """Each reviewer's draft per case: saved, read back and dropped; never chained."""

    @_guarded
    def save(
        self, reviewer: str, case_id: str, note: str, action: str | None, reason: str | None
    ) -> Draft:
        """Store (or replace) ``reviewer``'s draft for ``case_id``."""
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

    @_guarded
    def load(self, reviewer: str, case_id: str) -> Draft | None:
        """``reviewer``'s draft for ``case_id``, if any."""
        if not has_table(self._conn, "drafts"):
            return None
        row = self._conn.execute(
            f"SELECT {_DRAFT_COLUMNS} FROM drafts WHERE reviewer = ? AND case_id = ?",
            (reviewer, case_id),
        ).fetchone()
        return Draft(*row) if row else None

    @_guarded
    def of(self, reviewer: str) -> list[Draft]:
        """Every draft ``reviewer`` has saved, most recently updated first."""
        if not has_table(self._conn, "drafts"):
            return []
        rows = self._conn.execute(
            f"SELECT {_DRAFT_COLUMNS} FROM drafts WHERE reviewer = ? "
            "ORDER BY updated DESC, case_id",
            (reviewer,),
        ).fetchall()
        return [Draft(*row) for row in rows]

    @_guarded
    def drop(self, reviewer: str, case_id: str) -> None:
        """Discard ``reviewer``'s draft for ``case_id`` (no-op if there is none)."""
        with self._write() as conn:
            delete_draft(conn, reviewer, case_id)


class Claims(_MutableTable):
    """Soft claims per case: advice that someone has it open; they expire and never block.

    One claim per case and reviewer: the review screen that took or renewed it last holds it
    (its ``instance``), so an older screen of the same reviewer that exits later leaves it.
    """

    @_guarded
    def take(
        self, case_id: str, reviewer: str, minutes: float, instance: str | None = None
    ) -> Claim:
        """Mark ``case_id`` as open by ``reviewer`` (in review screen ``instance``) for
        ``minutes``; renews an existing claim, which then belongs to ``instance``."""
        now = utc_now()
        claim = Claim(
            case_id, reviewer, utc_iso(now), utc_iso(now + timedelta(minutes=minutes)), instance
        )
        with self._write() as conn:
            conn.execute("DELETE FROM claims WHERE expires_at <= ?", (claim.claimed_at,))
            conn.execute(
                "INSERT INTO claims (case_id, reviewer, claimed_at, expires_at, instance) "
                "VALUES (?, ?, ?, ?, ?) ON CONFLICT (case_id, reviewer) DO UPDATE SET "
                "claimed_at = excluded.claimed_at, expires_at = excluded.expires_at, "
                "instance = excluded.instance",
                (claim.case_id, claim.reviewer, claim.claimed_at, claim.expires_at, instance),
            )
        return claim

    @_guarded
    def release(self, case_id: str, reviewer: str, instance: str | None = None) -> None:
        """Withdraw ``reviewer``'s claim on ``case_id`` (no-op if there is none); with
        ``instance``, only while that review screen still holds it."""
        with self._write() as conn:
            if instance is None:
                conn.execute(
                    "DELETE FROM claims WHERE case_id = ? AND reviewer = ?", (case_id, reviewer)
                )
            else:
                conn.execute(
                    "DELETE FROM claims WHERE case_id = ? AND reviewer = ? AND instance = ?",
                    (case_id, reviewer, instance),
                )

    @_guarded
    def active(self, case_ids: Iterable[str] | None = None) -> dict[str, list[Claim]]:
        """Unexpired claims by case (all cases when ``case_ids`` is None), oldest first."""
        if not has_table(self._conn, "claims"):
            return {}
        now = utc_iso(utc_now())
        columns = {str(r[1]) for r in self._conn.execute("PRAGMA table_info(claims)")}
        instance = "instance" if "instance" in columns else "NULL"  # schema 2-3: no instance
        rows = self._conn.execute(
            f"SELECT case_id, reviewer, claimed_at, expires_at, {instance} FROM claims "
            "WHERE expires_at > ? ORDER BY claimed_at",
            (now,),
        ).fetchall()
        wanted = None if case_ids is None else set(case_ids)
        out: dict[str, list[Claim]] = {}
        for row in rows:
            if wanted is None or row[0] in wanted:
                out.setdefault(row[0], []).append(Claim(*row))
        return out
