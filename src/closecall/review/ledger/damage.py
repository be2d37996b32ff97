"""A ledger that is missing or cannot be used as it is: the errors every reader shares.

Kept apart from the store so that the chain check (:mod:`closecall.review.ledger.chain`),
which both stores call, needs nothing from either of them.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from closecall.core.errors import UserError
from closecall.review.ledger import schema

__all__ = ["DAMAGED_FIX", "DamagedLedger", "NoLedger"]


class NoLedger(UserError):
    """Read-only open of a ledger that does not exist yet (or holds nothing)."""


#: What to do about a ledger that cannot be used as it is: never let closecall "repair" it.
DAMAGED_FIX = (
    "do not edit the file: restore the ledger from your latest backup (docs/ledger.md, "
    "Backups), run 'closecall ledger verify' to list every problem, and tell the study's "
    "supervisor; closecall will not write to it as it is"
)


class DamagedLedger(UserError):
    """The file at the ledger path cannot be used as a ledger: not a closecall ledger, or one
    whose tables (or triggers, for writers) were changed outside closecall, or unreadable.

    ``kind`` names what is wrong for ``ledger verify``: ``not-a-ledger``, ``unreadable``
    (SQLite cannot read it, or a stored entry cannot be read back), ``empty-ledger`` (a file
    with no tables, which closecall never leaves), or ``structure`` (see ``findings``).
    """

    def __init__(
        self,
        path: Path | str,
        what: str,
        *,
        kind: str,
        findings: Sequence[schema.Finding] = (),
        fix: str = DAMAGED_FIX,
    ) -> None:
        super().__init__(f"{path}: {what}", fix)
        self.path = path
        self.kind = kind
        self.findings = tuple(findings)
