"""closecall: case-level review of borderline decisions made with statistical scoring models.

The library's one entry is :class:`Study` (docs/library.md). Names load on first use, so
``import closecall`` and the quick commands stay fast. Every type a public method of
:class:`Study` or its :class:`Ledger` returns can be imported from here
(tests/test_public_names.py).
"""

from __future__ import annotations

from importlib import import_module
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

_WHERE = {
    "Study": "closecall.api.study",
    "Ledger": "closecall.api.study",
    "QueueQuery": "closecall.review.query",
    "QueueAnswer": "closecall.review.query",
    "QueueResult": "closecall.api.results",
    "Explanation": "closecall.api.results",
    "LedgerAnchor": "closecall.api.results",
    "LedgerEntries": "closecall.api.results",
    "Report": "closecall.api.results",
    "WhatIfResult": "closecall.api.results",
    "DisparityResult": "closecall.api.results",
    "MarginDistribution": "closecall.analysis.margin_distribution",
    "Policy": "closecall.analysis.whatif",
    "Entry": "closecall.review.ledger",
    "Draft": "closecall.review.ledger",
    "Claim": "closecall.review.ledger",
    "VerifyResult": "closecall.review.ledger.verify",
    "ExportResult": "closecall.reports.export",
    "StudyConfig": "closecall.setup.config",
    "UserError": "closecall.core.errors",
}

__all__ = [
    "Claim",
    "DisparityResult",
    "Draft",
    "Entry",
    "Explanation",
    "ExportResult",
    "Ledger",
    "LedgerAnchor",
    "LedgerEntries",
    "MarginDistribution",
    "Policy",
    "QueueAnswer",
    "QueueQuery",
    "QueueResult",
    "Report",
    "Study",
    "StudyConfig",
    "UserError",
    "VerifyResult",
    "WhatIfResult",
]

if TYPE_CHECKING:
    from closecall.analysis.margin_distribution import MarginDistribution
    from closecall.analysis.whatif import Policy
    from closecall.api.results import (
        DisparityResult,
        Explanation,
        LedgerAnchor,
        LedgerEntries,
        QueueResult,
        Report,
        WhatIfResult,
    )
    from closecall.api.study import Ledger, Study
    from closecall.core.errors import UserError
    from closecall.reports.export import ExportResult
    from closecall.review.ledger import Claim, Draft, Entry
    from closecall.review.ledger.verify import VerifyResult
    from closecall.review.query import QueueAnswer, QueueQuery
    from closecall.setup.config import StudyConfig


def __getattr__(name: str) -> Any:
    if name in _WHERE:
        value = getattr(import_module(_WHERE[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'closecall' has no attribute '{name}'")


def __dir__() -> list[str]:
    return sorted([*globals(), *__all__])
