"""Each case's review state, from the ledger: the engine side of the list's 'state' column."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from closecall.core.vocabulary import ACTIONS, CONFLICT
from closecall.review.ledger import Entry
from closecall.suite.snapshot import Snapshot

if TYPE_CHECKING:
    from closecall.suite.opening import OpenedStudy

#: State codes: 0 = not reviewed, then 1 + the index of the latest action in ACTIONS, and
#: CONFLICT when reviewers' decisions in force disagree (closecall.review.conflicts).
NOT_REVIEWED = 0


def review_states(
    snap: Snapshot, entries: Sequence[Entry] | Sequence[tuple[str, str]]
) -> np.ndarray:
    """(n,) int8 per case: 0 not reviewed, else 1 + ACTIONS.index(its latest action).

    ``entries`` are ledger entries, or (case_id, action) pairs, in sequence order: the latest
    of a case wins, so a correction replaces what it supersedes. Cases outside the snapshot
    are ignored.
    """
    states = np.zeros(snap.n_cases, dtype=np.int8)
    if entries:
        pairs = [(e.case_id, e.action) if isinstance(e, Entry) else e for e in entries]
        rows = snap.rows_of([case for case, _ in pairs])
        codes = np.array([1 + ACTIONS.index(action) for _, action in pairs], dtype=np.int8)
        ok = rows >= 0
        states[rows[ok]] = codes[ok]
    return states


def mark_conflicts(snap: Snapshot, states: np.ndarray, case_ids: Sequence[str]) -> np.ndarray:
    """``states`` with the cases ``case_ids`` (ids outside the snapshot ignored) set to CONFLICT."""
    if case_ids:
        rows = snap.rows_of(list(case_ids))
        states[rows[rows >= 0]] = CONFLICT
    return states


def ledger_states(study: OpenedStudy) -> np.ndarray:
    """Every case's state from the ledger: latest action, or CONFLICT. Needs read permission."""
    from closecall.review.conflicts import study_conflicts
    from closecall.review.decisions import latest_actions

    states = review_states(study.snapshot, latest_actions(study.config))
    return mark_conflicts(study.snapshot, states, study_conflicts(study.config))


def study_review_states(study: OpenedStudy) -> tuple[np.ndarray, dict[str, list[str]]] | None:
    """Every case's state and who has it claimed; None when this login may not read the ledger.

    An absent ledger reads as nothing reviewed and nothing claimed.
    """
    from closecall.core.errors import AccessDenied
    from closecall.review.decisions import active_claims

    try:
        states = ledger_states(study)
        claims = active_claims(study)
    except AccessDenied:
        return None
    claimed = {case: [c.reviewer for c in cs] for case, cs in claims.items() if cs}
    return states, claimed
