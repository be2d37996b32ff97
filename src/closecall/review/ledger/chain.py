"""Recompute the hash chain and name the first entry that breaks it.

What is checked, entry by entry in sequence order:

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
table with its columns, no trigger the schema does not create (the open ledger's own
``structure_findings``).

This module reads an open ledger only (file or database, through :class:`ChainReader`), so both
stores can call it; :mod:`closecall.review.ledger.verify` opens the file and reports a
missing, empty or unreadable one.
"""

from __future__ import annotations

import json
from collections.abc import Iterator, Mapping
from dataclasses import asdict, dataclass
from typing import Any, Protocol

from closecall.core.errors import Fix
from closecall.review.ledger.damage import DamagedLedger
from closecall.review.ledger.entry import GENESIS_HASH, entry_hash, signed_message


class ChainReader(Protocol):
    """What :func:`verify_chain` reads of an open ledger, file or database."""

    def structure_findings(self) -> list[Any]: ...
    def iter_rows(self) -> Iterator[dict[str, Any]]: ...
    def head(self) -> tuple[int, str]: ...


@dataclass(frozen=True)
class Problem:
    """The first thing found wrong.

    ``kind`` is one of: ``missing`` (sequence gap: entry ``seq`` was deleted), ``edited``
    (fields do not match the hash), ``wrong-predecessor`` (does not link to the entry before),
    ``malformed`` (a stored value cannot be read), ``anchor-not-found``; for authorship
    ``forged-signature``, ``unregistered``, ``unsigned``; for the file's
    structure ``triggers-missing``, ``trigger-altered``, ``table-missing``, ``table-altered``,
    ``index-missing``, ``index-altered``, ``unexpected-object``; for the file itself
    ``no-ledger``, ``empty-ledger``, ``no-entries``, ``not-a-ledger``, ``unreadable``.
    """

    kind: str
    seq: int | None
    message: str
    #: what to do about it, for each view to word (a missing or empty ledger: allow one)
    remedy: Fix | None = None


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
    signed: int = 0  # entries whose signature verified against the registered key
    unsigned: tuple[int, ...] = ()  # valid unsigned entries (before the first signed one)
    keys_checked: bool = False  # public keys were registered, so signatures were checked

    @property
    def first_broken(self) -> int | None:
        return self.problem.seq if self.problem else None

    def to_dict(self) -> dict[str, Any]:
        d = asdict(self)
        d["first_broken"] = self.first_broken
        return d


#: At most this many authorship problems are named one by one (then a count).
MAX_NAMED = 20


class _Authorship:
    """Signature checks, entry by entry, against the registered keys."""

    def __init__(self, keys: Mapping[str, str] | None) -> None:
        from closecall.review.ledger import signing

        self._signing = signing
        self.keys = {login: signing.parse_public(text) for login, text in (keys or {}).items()}
        self.checked = bool(self.keys)
        self.signed = 0
        self.seen_signed = False
        self.unsigned: list[int] = []
        self.problems: list[Problem] = []
        self.more = 0

    def _add(self, problem: Problem) -> None:
        if len(self.problems) < MAX_NAMED:
            self.problems.append(problem)
        else:
            self.more += 1

    def check(self, fields: dict[str, Any]) -> None:
        seq, reviewer = fields["seq"], fields["reviewer"]
        signature = fields.get("signature") if fields["format"] != 1 else None
        if signature is None:
            if self.seen_signed and self.checked:
                self._add(
                    Problem(
                        "unsigned",
                        seq,
                        f"entry {seq} (reviewer {reviewer}) carries no signature, but entries "
                        "before it are signed: it was added outside closecall or by a login "
                        "whose key was not used",
                    )
                )
            else:
                self.unsigned.append(seq)
            return
        self.seen_signed = True
        if not self.checked:
            return
        public = self.keys.get(reviewer)
        if public is None:
            self._add(
                Problem(
                    "unregistered",
                    seq,
                    f"entry {seq} is signed in the name of {reviewer}, who has no public key "
                    "registered under [team.keys]: its author cannot be checked",
                )
            )
            return
        if not isinstance(signature, str) or not self._signing.signature_valid(
            public, signed_message(fields), signature
        ):
            self._add(
                Problem(
                    "forged-signature",
                    seq,
                    f"entry {seq} claims reviewer {reviewer}, but its signature is not made "
                    f"by {reviewer}'s registered key: the entry was forged or altered "
                    "(written in another's name)",
                )
            )
            return
        self.signed += 1

    def all_problems(self) -> list[Problem]:
        if self.more:
            return [
                *self.problems,
                Problem("forged-signature", None, f"and {self.more} more authorship problems"),
            ]
        return self.problems


def verify_chain(
    ledger: ChainReader, anchor: str | None = None, keys: Mapping[str, str] | None = None
) -> VerifyResult:
    """Recompute every hash of ``ledger``, check every link and, with ``keys`` (login ->
    base64 Ed25519 public key), every signature; see the module docstring."""
    anchor = anchor.strip().lower() if anchor else None
    authorship = _Authorship(keys)
    expected_seq, expected_prev = 1, GENESIS_HASH
    verified = 0
    read = 0
    anchor_seq: int | None = 0 if anchor == GENESIS_HASH else None
    problem: Problem | None = None
    findings = ledger.structure_findings()
    entries_changed = any(f.name == "entries" and f.breaks_reading for f in findings)
    rows = ledger.iter_rows()
    while True:
        try:
            row = next(rows)
        except StopIteration:
            break
        except DamagedLedger as exc:  # the entries cannot be read (on)
            if not entries_changed:  # else the finding below says why
                problem = problem or Problem(
                    "unreadable", None, f"the entries cannot be read: {exc.message}"
                )
            break
        read += 1
        if problem is not None:
            continue  # keep counting rows; only the first break is named
        problem, fields = _link_problem(row, expected_seq, expected_prev)
        if problem is not None:
            continue
        authorship.check(fields)
        if anchor is not None and row["hash"] == anchor:
            anchor_seq = row["seq"]
        verified += 1
        expected_seq, expected_prev = row["seq"] + 1, row["hash"]
    problems = _all_problems(problem, authorship, anchor, anchor_seq, verified, findings)
    try:
        head_seq, head_hash = ledger.head()
    except DamagedLedger:
        head_seq, head_hash = 0, GENESIS_HASH
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
        signed=authorship.signed,
        unsigned=tuple(authorship.unsigned),
        keys_checked=authorship.checked,
    )


def _link_problem(
    row: dict[str, Any], expected_seq: int, expected_prev: str
) -> tuple[Problem | None, dict[str, Any]]:
    """What breaks the chain at this row (sequence, hash, predecessor), if anything; and the
    row's fields with its decisions parsed, for the signature check."""
    seq = row["seq"]
    if seq != expected_seq:
        return Problem(
            "missing",
            expected_seq,
            f"entry {expected_seq} is missing: the sequence goes from {expected_seq - 1} "
            f"to {seq} (deleted entries)"
            if seq > expected_seq
            else f"entry {seq} is out of sequence (expected {expected_seq})",
        ), row
    try:
        fields = {**row, "decisions": json.loads(row["decisions"])}
        recomputed = entry_hash(fields)
    except (ValueError, TypeError) as exc:
        return Problem("malformed", seq, f"entry {seq} cannot be read: {exc}"), row
    if recomputed != row["hash"]:
        return Problem(
            "edited",
            seq,
            f"entry {seq} was altered after it was recorded: its fields hash to "
            f"{recomputed[:16]}…, but it carries {str(row['hash'])[:16]}…",
        ), fields
    if row["prev_hash"] != expected_prev:
        return Problem(
            "wrong-predecessor",
            seq,
            f"entry {seq} does not follow entry {seq - 1}: it names predecessor "
            f"{str(row['prev_hash'])[:16]}…, but entry {seq - 1} has hash "
            f"{expected_prev[:16]}… (forged, reordered or replaced entries)",
        ), fields
    return None, fields


def _all_problems(
    problem: Problem | None,
    authorship: _Authorship,
    anchor: str | None,
    anchor_seq: int | None,
    verified: int,
    findings: list[Any],
) -> list[Problem]:
    """The first break of the chain, then signature problems, a missing anchor and changes
    to the ledger's structure, in that order."""
    problems: list[Problem] = [problem] if problem else []
    problems.extend(authorship.all_problems())
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
    for finding in findings:
        problems.append(
            Problem(finding.kind, None, f"{finding.message}: someone changed its structure by hand")
        )
    return problems
