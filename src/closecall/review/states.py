"""Each case's review state, from the ledger: the engine side of the list's 'state' column."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from closecall.review.ledger import ACTIONS, Entry
from closecall.suite.snapshot import Snapshot

if TYPE_CHECKING:
    from closecall.suite.opening import OpenedStudy

#: State codes: 0 = not reviewed, then 1 + the index of the latest action in ACTIONS.
NOT_REVIEWED = 0
STATE_NAMES = ("open", *ACTIONS)


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


def study_review_states(study: OpenedStudy) -> tuple[np.ndarray, dict[str, list[str]]] | None:
    """Every case's state and who has it claimed; None when this login may not read the ledger.

    An absent ledger reads as nothing reviewed and nothing claimed.
    """
    from closecall.core.errors import AccessDenied
    from closecall.review.decisions import active_claims, latest_actions

    try:
        latest = latest_actions(study.config)
        claims = active_claims(study)
    except AccessDenied:
        return None
    claimed = {case: [c.reviewer for c in cs] for case, cs in claims.items() if cs}
    return review_states(study.snapshot, latest), claimed
