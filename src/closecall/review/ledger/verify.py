"""Verify a ledger file: it must be there, and its chain and structure intact.

The chain itself is checked by :mod:`closecall.review.ledger.chain` (its names are
re-exported here). What is checked, entry by entry in sequence order:

1. the sequence continues without a gap (a deleted entry shows as a gap);
2. the stored fields hash to the stored hash (an edited or moved entry fails here);
3. the entry's ``prev_hash`` is the hash of the entry before it (a forged entry whose own hash
   was recomputed, or entries put in another order with recomputed hashes, fail here).

An anchor — a head hash copied somewhere else earlier — must be the hash of an entry still in
the verified chain; if it is not, entries up to the anchor were removed (a truncated tail) or
the chain was rewritten since.

With the study's registered public keys (``[team.keys]``), every signature is checked against
the key registered for the entry's reviewer (RFC 8032 Ed25519 over the entry's signed fields):
a signature that does not verify is ``forged-signature``; a signed entry whose reviewer has no
registered key is ``unregistered``; an unsigned entry after the first signed one is
``unsigned`` (a study that signs takes no unsigned entry). Unsigned entries before the first
signed one (recorded before the study registered keys) stay valid and are listed.

The file's structure must be the schema's: the append-only triggers in place *with the
definitions the schema gives them* (a same-named trigger that does nothing is tampering), every
table with its columns, no trigger the schema does not create. And the ledger must be there:
:func:`verify_file` reports a missing, empty or unreadable file unless empty is allowed.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path

from closecall.core.errors import Fix
from closecall.review.ledger.chain import (
    MAX_NAMED,
    ChainReader,
    Problem,
    VerifyResult,
    verify_chain,
)
from closecall.review.ledger.entry import GENESIS_HASH
from closecall.review.ledger.store import DamagedLedger, NoLedger, open_ledger

__all__ = [
    "MAX_NAMED",
    "ChainReader",
    "Problem",
    "VerifyResult",
    "verify_chain",
    "verify_file",
    "verify_opened",
]


_ALLOW = "accept an empty ledger if the study has no reviews yet"
_ALLOW_FIX = Fix("allow_empty", switch=True, purpose="if the study has no reviews yet")


def _missing_file(path: Path) -> Problem:
    return Problem(
        "no-ledger",
        None,
        f"there is no ledger file at {path}: it was deleted or moved, [review] ledger names "
        f"the wrong file, or no review was ever recorded. Restore it from a backup, correct "
        f"[review] ledger, or {_ALLOW}",
        _ALLOW_FIX,
    )


def _empty_file(path: Path) -> Problem:
    return Problem(
        "empty-ledger",
        None,
        f"the ledger file {path} is empty ({path.stat().st_size} bytes, no tables): closecall "
        f"never leaves a ledger like this, so it was emptied or made by hand. Restore it from "
        f"a backup, or {_ALLOW}",
        _ALLOW_FIX,
    )


def _no_entries(path: Path) -> Problem:
    return Problem(
        "no-entries",
        None,
        f"the ledger {path} holds no entries (none recorded yet, or all removed). Restore it "
        f"from a backup if reviews were recorded, or {_ALLOW}",
        _ALLOW_FIX,
    )


def _unverifiable(problem: Problem, anchor: str | None) -> VerifyResult:
    return VerifyResult(
        ok=False,
        entries=0,
        verified=0,
        head_seq=0,
        head_hash=GENESIS_HASH,
        problem=problem,
        anchor=anchor,
        anchor_seq=None,
        problems=(problem,),
    )


def verify_file(
    path: str | Path,
    anchor: str | None = None,
    *,
    allow_empty: bool = False,
    keys: Mapping[str, str] | None = None,
) -> VerifyResult:
    """Verify the ledger file at ``path``: its presence, structure and chain (a ledger in
    PostgreSQL: :func:`closecall.review.ledger.backend.verify_any`).

    A missing file, a file with no tables and a ledger with no entries are each a problem
    (``no-ledger``, ``empty-ledger``, ``no-entries``) unless ``allow_empty``; a folder or a
    file that is not a closecall ledger is ``not-a-ledger``, one SQLite cannot read is
    ``unreadable``; a ledger whose structure differs from the schema is read as far as it can
    be and every difference is named (see :func:`verify_chain`). Never writes to the file.

    Raises
    ------
    UserError
        The file could not be read for a reason outside it (permissions, a lock held by
        another program) or was written by a newer closecall.
    """
    anchor = anchor.strip().lower() if anchor else None
    path = Path(path)
    if not path.exists():  # (a dangling link too)
        return _nothing(_missing_file(path), anchor, allow_empty, path)
    try:
        ledger = open_ledger(path, inspect=True)
    except NoLedger:
        return _nothing(_empty_file(path), anchor, allow_empty, path)
    except DamagedLedger as exc:
        return _unverifiable(Problem(exc.kind, None, exc.message), anchor)
    with ledger:
        try:
            result = verify_chain(ledger, anchor, keys)
        except DamagedLedger as exc:
            return _unverifiable(Problem(exc.kind, None, exc.message), anchor)
    if result.entries == 0 and result.ok:
        return _nothing(_no_entries(path), anchor, allow_empty, path)
    return result


def verify_opened(
    ledger: ChainReader,
    where: str,
    anchor: str | None = None,
    *,
    allow_empty: bool = False,
    keys: Mapping[str, str] | None = None,
) -> VerifyResult:
    """:func:`verify_chain` of an open ledger (a database's: see
    :func:`closecall.review.ledger.pg_store.verify_database`), with a ledger that holds no
    entries a ``no-entries`` problem unless ``allow_empty``; ``where`` names it in messages."""
    anchor = anchor.strip().lower() if anchor else None
    result = verify_chain(ledger, anchor, keys)
    if result.entries == 0 and result.ok:
        problem = Problem(
            "no-entries",
            None,
            f"the ledger {where} holds no entries (none recorded yet, or all removed). Restore "
            f"it from a backup if reviews were recorded, or {_ALLOW}",
            _ALLOW_FIX,
        )
        return _nothing(problem, anchor, allow_empty, where)
    return result


def _nothing(
    problem: Problem, anchor: str | None, allow_empty: bool, path: Path | str
) -> VerifyResult:
    """The result for a ledger with nothing in it: ``problem`` unless empty is allowed."""
    problems = [] if allow_empty else [problem]
    if anchor is not None and anchor != GENESIS_HASH:
        problems.append(
            Problem(
                "anchor-not-found",
                None,
                f"the anchor {anchor[:16]}… is not in the chain: the ledger {path} has no "
                "entries (deleted or never written)",
            )
        )
    return VerifyResult(
        ok=not problems,
        entries=0,
        verified=0,
        head_seq=0,
        head_hash=GENESIS_HASH,
        problem=problems[0] if problems else None,
        anchor=anchor,
        anchor_seq=0 if anchor == GENESIS_HASH else None,
        problems=tuple(problems),
    )
