"""One ledger entry, its canonical JSON form and its SHA-256 chain hash.

The hash of entry n is ``sha256(canonical_json(fields of n, including prev_hash))`` where
``prev_hash`` is the hash of entry n − 1 (or :data:`GENESIS_HASH` for the first entry).
Canonical JSON is Python's ``json.dumps(obj, sort_keys=True, separators=(",", ":"),
ensure_ascii=False, allow_nan=False)`` encoded as UTF-8: keys sorted, no whitespace, floats in
their shortest round-trip form. docs/ledger.md shows a stand-alone verifier built on that alone.

References
----------
FIPS 180-4, Secure Hash Standard (SHA-256).
Haber, Stornetta, "How to time-stamp a digital document", J. Cryptology 3(2), 1991 (hash-linked
records).
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from typing import Any

from closecall.core.vocabulary import OVERRIDES

#: Version of the hashed entry layout; stored in every entry so the layout can grow later.
#: Format 1 (before signatures) hashes :data:`SIGNED_FIELDS`; format 2 adds ``signature``.
ENTRY_FORMAT = 2

#: The predecessor hash of the first entry.
GENESIS_HASH = "0" * 64

#: The reviewer's possible actions on a case.

#: Fields the author's Ed25519 signature covers (and, in format 1, the hash covers).
SIGNED_FIELDS = (
    "seq",
    "format",
    "time",
    "reviewer",
    "case_id",
    "snapshot_id",
    "current_snapshot_id",
    "reference_model",
    "reference_decision",
    "reference_margin",
    "decisions",
    "action",
    "reason",
    "note",
    "supersedes",
    "prev_hash",
)

#: Fields covered by the hash of a format-2 entry, in the order they are stored (the hash
#: itself is not covered): the signed fields and the signature (None when unsigned).
HASHED_FIELDS = (*SIGNED_FIELDS, "signature")


def canonical_json(obj: Any) -> bytes:
    """The canonical UTF-8 JSON bytes of ``obj``: sorted keys, no whitespace, no NaN."""
    return json.dumps(
        obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False
    ).encode("utf-8")


def hashed_names(entry_format: object) -> tuple[str, ...]:
    """The names the hash covers for an entry of ``entry_format`` (1: no signature)."""
    return SIGNED_FIELDS if entry_format == 1 else HASHED_FIELDS


def entry_hash(fields: dict[str, Any]) -> str:
    """SHA-256 (hex) over the canonical JSON of an entry's hashed fields."""
    names = hashed_names(fields["format"])
    return hashlib.sha256(canonical_json({k: fields[k] for k in names})).hexdigest()


def signed_message(fields: dict[str, Any]) -> bytes:
    """The bytes the author signs: canonical JSON of :data:`SIGNED_FIELDS` (sequence number and
    predecessor hash included, so a signature cannot be replayed elsewhere in the chain)."""
    return canonical_json({k: fields[k] for k in SIGNED_FIELDS})


@dataclass(frozen=True)
class EntryContent:
    """What a reviewer records about one case, before the ledger numbers and chains it.

    Parameters
    ----------
    reviewer
        Who records: the OS login for a ledger file; a PostgreSQL ledger replaces it with the
        database session user when it numbers the entry.
    case_id
        The reviewed case.
    snapshot_id
        The snapshot the reviewer saw when deciding.
    current_snapshot_id
        The snapshot current when the entry was recorded, if different (a stale review);
        otherwise None.
    reference_model, reference_decision, reference_margin
        The reference model's name, decision ("favourable"/"unfavourable") and margin
        (log-odds; None if not finite) at review time.
    decisions
        Every suite model's ``{"decision": ..., "margin": ...}`` at review time.
    action
        One of :data:`ACTIONS`.
    reason
        A reason code from the study's configured list, or None.
    note
        Free text, stored exactly.
    supersedes
        Sequence number of an earlier entry for the same case this one corrects, or None.
    """

    reviewer: str
    case_id: str
    snapshot_id: str
    current_snapshot_id: str | None
    reference_model: str
    reference_decision: str
    reference_margin: float | None
    decisions: dict[str, dict[str, Any]]
    action: str
    reason: str | None
    note: str
    supersedes: int | None = None


def entry_fields(
    content: EntryContent,
    *,
    seq: int | None,
    time: str | None,
    reviewer: str | None,
    prev_hash: str | None,
) -> dict[str, Any]:
    """An entry's signed fields: ``content`` (its decisions as plain JSON types) and the
    chain's part, which a ledger fills in under its head lock (None until then)."""
    return {
        "seq": seq,
        "format": ENTRY_FORMAT,
        "time": time,
        "reviewer": reviewer,
        "case_id": content.case_id,
        "snapshot_id": content.snapshot_id,
        "current_snapshot_id": content.current_snapshot_id,
        "reference_model": content.reference_model,
        "reference_decision": content.reference_decision,
        "reference_margin": (
            None if content.reference_margin is None else float(content.reference_margin)
        ),
        "decisions": json.loads(canonical_json(content.decisions)),
        "action": content.action,
        "reason": content.reason,
        "note": content.note,
        "supersedes": content.supersedes,
        "prev_hash": prev_hash,
    }


@dataclass(frozen=True)
class Entry:
    """A recorded, chained ledger entry. Never edited: corrections are new entries."""

    seq: int
    time: str  # UTC, ISO 8601, e.g. 2026-12-01T21:32:25.123456Z
    reviewer: str
    case_id: str
    snapshot_id: str
    current_snapshot_id: str | None
    reference_model: str
    reference_decision: str
    reference_margin: float | None
    decisions: dict[str, dict[str, Any]] = field(hash=False)
    action: str
    reason: str | None
    note: str
    supersedes: int | None
    prev_hash: str
    hash: str
    format: int = ENTRY_FORMAT
    signature: str | None = None  # base64 Ed25519 over signed_message(); None: unsigned

    def hashed_fields(self) -> dict[str, Any]:
        """The fields the chain hash covers, as plain JSON values."""
        return {k: getattr(self, k) for k in hashed_names(self.format)}

    def to_dict(self) -> dict[str, Any]:
        """All fields (signature None for format 1), including the hash, as plain JSON values."""
        return {**{k: getattr(self, k) for k in HASHED_FIELDS}, "hash": self.hash}

    def computed_hash(self) -> str:
        """The hash these fields should carry; differs from :attr:`hash` if edited."""
        return entry_hash(self.hashed_fields())

    @property
    def is_override(self) -> bool:
        return self.action in OVERRIDES
