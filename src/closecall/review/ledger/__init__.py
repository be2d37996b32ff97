"""The review ledger: append-only, hash-chained, shared by several reviewers at once.

See docs/ledger.md for the format and guarantees.
"""

from closecall.core.vocabulary import ACTIONS, OVERRIDES
from closecall.review.ledger.access import current_login, ledger_login, may_read, may_record
from closecall.review.ledger.drafts import Claim, Claims, Draft, Drafts
from closecall.review.ledger.entry import (
    GENESIS_HASH,
    Entry,
    EntryContent,
    canonical_json,
    entry_hash,
)
from closecall.review.ledger.schema import SCHEMA_VERSION
from closecall.review.ledger.store import DamagedLedger, Ledger, NoLedger, open_ledger
from closecall.review.ledger.verify import Problem, VerifyResult, verify_chain, verify_file

__all__ = [
    "ACTIONS",
    "GENESIS_HASH",
    "OVERRIDES",
    "SCHEMA_VERSION",
    "Claim",
    "Claims",
    "DamagedLedger",
    "Draft",
    "Drafts",
    "Entry",
    "EntryContent",
    "Ledger",
    "NoLedger",
    "Problem",
    "VerifyResult",
    "canonical_json",
    "current_login",
    "entry_hash",
    "ledger_login",
    "may_read",
    "may_record",
    "open_ledger",
    "verify_chain",
    "verify_file",
]
