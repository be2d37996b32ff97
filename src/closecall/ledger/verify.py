"""Recompute the hash chain and name the first entry that breaks it.

What is checked, entry by entry in sequence order:

1. the sequence continues without a gap (a deleted entry shows as a gap);
2. the stored fields hash to the stored hash (an edited or moved entry fails here);
3. the entry's ``prev_hash`` is the hash of the entry before it (a forged entry whose own hash
   was recomputed, or entries put in another order with recomputed hashes, fail here).

An anchor — a head hash copied somewhere else earlier — must be the hash of an entry still in
the verified chain; if it is not, entries up to the anchor were removed (a truncated tail) or
the chain was rewritten since. The append-only triggers must still be in place.
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass
from typing import Any

from closecall.ledger.entry import GENESIS_HASH, entry_hash
from closecall.ledger.store import Ledger


@dataclass(frozen=True)
class Problem:
    """The first thing found wrong.

    ``kind`` is one of: ``missing`` (sequence gap: entry ``seq`` was deleted), ``edited``
    (fields do not match the hash), ``wrong-predecessor`` (does not link to the entry before),
    ``malformed`` (a stored value cannot be read), ``anchor-not-found``, ``triggers-missing``.
    """

    kind: str
    seq: int | None
    message: str


@dataclass(frozen=True)
class VerifyResult:
    """Outcome of :func:`verify_chain`."""

    ok: bool
    entries: int  # entries read
    verified: int  # entries verified before the first break (all of them when ok)
    head_seq: int  # last stored entry (0 when empty)
    head_hash: str  # its stored hash; trust it only when ok
    problem: Problem | None
    anchor: str | None
    anchor_seq: int | None  # where the anchor was found in the chain
    problems: tuple[Problem, ...] = ()  # the first break plus any structural findings

    @property
    def first_broken(self) -> int | None:
        return self.problem.seq if self.problem else None

    def to_dict(self) -> dict[str, Any]:
        d = asdict(self)
        d["first_broken"] = self.first_broken
        return d


def verify_chain(ledger: Ledger, anchor: str | None = None) -> VerifyResult:
    """Recompute every hash of ``ledger`` and check every link; see the module docstring."""
    anchor = anchor.strip().lower() if anchor else None
    expected_seq, expected_prev = 1, GENESIS_HASH
    verified = 0
    read = 0
    anchor_seq: int | None = 0 if anchor == GENESIS_HASH else None
    problem: Problem | None = None
    for row in ledger.iter_rows():
        read += 1
        if problem is not None:
            continue  # keep counting rows; only the first break is named
        seq = row["seq"]
        if seq != expected_seq:
            problem = Problem(
                "missing",
                expected_seq,
                f"entry {expected_seq} is missing: the sequence goes from {expected_seq - 1} "
                f"to {seq} (deleted entries)"
                if seq > expected_seq
                else f"entry {seq} is out of sequence (expected {expected_seq})",
            )
            continue
        try:
            fields = {**row, "decisions": json.loads(row["decisions"])}
            recomputed = entry_hash(fields)
        except (ValueError, TypeError) as exc:
            problem = Problem("malformed", seq, f"entry {seq} cannot be read: {exc}")
            continue
        if recomputed != row["hash"]:
            problem = Problem(
                "edited",
                seq,
                f"entry {seq} was altered after it was recorded: its fields hash to "
                f"{recomputed[:16]}…, but it carries {str(row['hash'])[:16]}…",
            )
            continue
        if row["prev_hash"] != expected_prev:
            problem = Problem(
                "wrong-predecessor",
                seq,
                f"entry {seq} does not follow entry {seq - 1}: it names predecessor "
                f"{str(row['prev_hash'])[:16]}…, but entry {seq - 1} has hash "
                f"{expected_prev[:16]}… (forged, reordered or replaced entries)",
            )
            continue
        if anchor is not None and row["hash"] == anchor:
            anchor_seq = seq
        verified += 1
        expected_seq, expected_prev = seq + 1, row["hash"]

    problems: list[Problem] = [problem] if problem else []
    if anchor is not None and anchor_seq is None and problem is None:
        problems.append(
            Problem(
                "anchor-not-found",
                None,
                f"the anchor {anchor[:16]}… is not in the chain of {verified} entries: entries "
                "were removed from the end (truncated) or the chain was rewritten since the "
                "anchor was taken",
            )
        )
    missing = ledger.missing_triggers()
    if missing:
        problems.append(
            Problem(
                "triggers-missing",
                None,
                f"the append-only triggers {', '.join(missing)} were removed from the file: "
                "someone changed its structure by hand",
            )
        )
    head_seq, head_hash = ledger.head()
    return VerifyResult(
        ok=not problems,
        entries=read,
        verified=verified,
        head_seq=head_seq,
        head_hash=head_hash,
        problem=problems[0] if problems else None,
        anchor=anchor,
        anchor_seq=anchor_seq,
        problems=tuple(problems),
    )
