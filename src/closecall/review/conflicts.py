"""Decisions that don't collide: whose decisions on a case are in force, and when they disagree.

A case's *effective* decisions are each reviewer's latest entry on it, less every entry another
entry explicitly supersedes. Recording refuses, with the other entry's number, author, time,
action and note, when another reviewer already has an effective decision on the case — unless
the new entry supersedes it (``supersedes=N``) or is knowingly added beside it as a second
opinion. The review screen passes the highest sequence number it had read when the case was
opened (``seen_seq``), so only decisions recorded since then interrupt; the command line checks
every entry. A case whose effective decisions (deferrals aside) name different actions is in
*conflict*: the queue and the case list show it so.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from closecall.core.errors import Fix, UserError
from closecall.review.ledger import Entry, NoLedger
from closecall.review.ledger.backend import ledger_present, open_any_ledger
from closecall.setup.config import StudyConfig

#: Actions that do not decide a case: never in conflict with a decision.
NOT_A_DECISION = ("defer",)


class ConflictingDecision(UserError):
    """Another reviewer has an effective decision on the case; ``others`` holds their entries."""

    def __init__(self, case_id: str, others: Sequence[Entry]) -> None:
        self.case_id = case_id
        self.others = list(others)
        told = "; ".join(describe_entry(e) for e in self.others)
        first = self.others[0].seq
        super().__init__(
            f"case '{case_id}' already has a decision by another reviewer: {told}",
            Fix(
                "supersedes",
                value=str(first),
                purpose="to replace it",
                alternative=Fix("second_opinion", switch=True, purpose="to add yours beside it"),
                hint="otherwise leave the case as it is",
            ),
        )


def describe_entry(e: Entry, note_chars: int = 120) -> str:
    """``entry 7 by alice at 2026-12-03 22:01 UTC: uphold (reason), note "…"``."""
    note = " ".join(e.note.split())
    if len(note) > note_chars:
        note = note[: note_chars - 1] + "…"
    when = e.time[:16].replace("T", " ") + " UTC"
    reason = f" ({e.reason})" if e.reason else ""
    return f'entry {e.seq} by {e.reviewer} at {when}: {e.action}{reason}, note "{note}"'


def effective_entries(entries: Sequence[Entry]) -> list[Entry]:
    """One case's entries in force: each reviewer's latest, less those superseded (seq order)."""
    superseded = {e.supersedes for e in entries if e.supersedes is not None}
    latest: dict[str, Entry] = {}
    for e in sorted(entries, key=lambda x: x.seq):
        latest[e.reviewer] = e
    return sorted((e for e in latest.values() if e.seq not in superseded), key=lambda x: x.seq)


def colliding_entries(
    entries: Sequence[Entry],
    login: str,
    *,
    seen_seq: int | None = None,
    supersedes: int | None = None,
) -> list[Entry]:
    """Other reviewers' effective entries a new entry by ``login`` would silently contradict.

    Only entries after ``seen_seq`` count when it is given; the one ``supersedes`` names
    never does (the new entry replaces it explicitly).
    """
    return [
        e
        for e in effective_entries(entries)
        if e.reviewer != login and e.seq != supersedes and (seen_seq is None or e.seq > seen_seq)
    ]


def check_no_collision(
    config: StudyConfig,
    case_id: str,
    login: str,
    *,
    seen_seq: int | None = None,
    supersedes: int | None = None,
    second_opinion: bool = False,
    entries: Sequence[Entry] | None = None,
) -> None:
    """Raise :class:`ConflictingDecision` when recording would contradict another reviewer.

    ``second_opinion`` records knowingly beside the other decisions; it cannot be combined
    with ``supersedes`` (an entry either replaces one or stands beside the others).
    ``entries`` are the case's entries when the caller has read them (read here otherwise).
    """
    if second_opinion and supersedes is not None:
        raise UserError(
            f"replacing entry {supersedes} and a second opinion beside it contradict each other",
            Fix(
                "supersedes",
                value=str(supersedes),
                purpose=f"alone to replace entry {supersedes}",
                alternative=Fix("second_opinion", switch=True, purpose="alone to stand beside it"),
            ),
        )
    if second_opinion:
        return
    if entries is None:
        entries = case_entries(config, case_id)
    others = colliding_entries(entries, login, seen_seq=seen_seq, supersedes=supersedes)
    if others:
        raise ConflictingDecision(case_id, others)


def case_entries(config: StudyConfig, case_id: str) -> list[Entry]:
    """Every entry on ``case_id`` (no permission check: the caller has one); empty without a
    ledger."""
    if not ledger_present(config.review.ledger):
        return []
    try:
        with open_any_ledger(config.review.ledger, readonly=True) as ledger:
            return ledger.entries(case_id=case_id)
    except NoLedger:
        return []


def last_seq(config: StudyConfig) -> int:
    """The highest sequence number in the ledger (0 when there is none yet)."""
    if not ledger_present(config.review.ledger):
        return 0
    try:
        with open_any_ledger(config.review.ledger, readonly=True) as ledger:
            return ledger.head()[0]
    except NoLedger:
        return 0


def conflicted_cases(entries: Sequence[Entry]) -> list[str]:
    """Case ids whose effective decisions (deferrals aside) name different actions.

    Vectorised over the ledger's entries (pandas group-bys, no loop per entry).
    """
    if not entries:
        return []
    import pandas as pd  # here, not at start-up: most commands never need it

    frame = pd.DataFrame(
        {
            "seq": np.fromiter((e.seq for e in entries), dtype=np.int64, count=len(entries)),
            "case": [e.case_id for e in entries],
            "reviewer": [e.reviewer for e in entries],
            "action": [e.action for e in entries],
            "supersedes": [e.supersedes for e in entries],
        }
    ).sort_values("seq")
    superseded = set(frame["supersedes"].dropna().astype(np.int64).tolist())
    latest = frame.groupby(["case", "reviewer"], sort=False).tail(1)
    live = latest[~latest["seq"].isin(superseded) & ~latest["action"].isin(NOT_A_DECISION)]
    kinds = live.groupby("case", sort=True)["action"].nunique()
    return [str(c) for c in kinds.index[kinds.to_numpy() > 1]]


def study_conflicts(config: StudyConfig) -> list[str]:
    """:func:`conflicted_cases` over the study's whole ledger (empty without one)."""
    if not ledger_present(config.review.ledger):
        return []
    try:
        with open_any_ledger(config.review.ledger, readonly=True) as ledger:
            return conflicted_cases(ledger.entries())
    except NoLedger:
        return []
