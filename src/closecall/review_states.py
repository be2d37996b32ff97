"""Each case's review state, from the ledger: the engine side of the list's 'state' column."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from closecall.ledger import ACTIONS, Entry
from closecall.snapshot import Snapshot

if TYPE_CHECKING:
    from closecall.study import Study

#: State codes: 0 = not reviewed, then 1 + the index of the latest action in ACTIONS.
NOT_REVIEWED = 0
STATE_NAMES = ("open", *ACTIONS)


def review_states(snap: Snapshot, entries: Sequence[Entry]) -> np.ndarray:
    """(n,) int8 per case: 0 not reviewed, else 1 + ACTIONS.index(its latest action).

    ``entries`` in sequence order (as the ledger returns them): the latest entry of a case wins,
    so a correction replaces what it supersedes. Entries for cases outside the snapshot are
    ignored.
    """
    states = np.zeros(snap.n_cases, dtype=np.int8)
    if entries:
        rows = snap.rows_of([e.case_id for e in entries])
        codes = np.array([1 + ACTIONS.index(e.action) for e in entries], dtype=np.int8)
        ok = rows >= 0
        states[rows[ok]] = codes[ok]
    return states


def study_review_states(study: Study) -> tuple[np.ndarray, dict[str, list[str]]] | None:
    """Every case's state and who has it claimed; None when this login may not read the ledger.

    An absent ledger reads as nothing reviewed and nothing claimed.
    """
    from closecall.errors import AccessDenied
    from closecall.reviews import active_claims, ledger_entries

    try:
        entries = ledger_entries(study.config)
        claims = active_claims(study)
    except AccessDenied:
        return None
    claimed = {case: [c.reviewer for c in cs] for case, cs in claims.items() if cs}
    return review_states(study.snapshot, entries), claimed
