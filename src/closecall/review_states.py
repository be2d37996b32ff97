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


def case_rows(snap: Snapshot, case_ids: Sequence[str]) -> np.ndarray:
    """Snapshot rows of case ids, −1 for ids the snapshot does not hold (vectorised)."""
    ids = np.asarray(snap.case_ids)
    if len(case_ids) == 0 or len(ids) == 0:
        return np.full(len(case_ids), -1, dtype=np.int64)
    order = np.argsort(ids, kind="stable")
    sorted_ids = ids[order]
    wanted = np.asarray(case_ids, dtype=sorted_ids.dtype)
    at = np.minimum(np.searchsorted(sorted_ids, wanted), len(sorted_ids) - 1)
    return np.where(sorted_ids[at] == wanted, order[at], -1)


def review_states(snap: Snapshot, entries: Sequence[Entry]) -> np.ndarray:
    """(n,) int8 per case: 0 not reviewed, else 1 + ACTIONS.index(its latest action).

    ``entries`` in sequence order (as the ledger returns them): the latest entry of a case wins,
    so a correction replaces what it supersedes. Entries for cases outside the snapshot are
    ignored.
    """
    states = np.zeros(snap.n_cases, dtype=np.int8)
    if entries:
        rows = case_rows(snap, [e.case_id for e in entries])
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
