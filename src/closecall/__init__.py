"""closecall: case-level review of borderline decisions made with statistical scoring models.

The library's one entry is :class:`Study` (docs/library.md). Names load on first use, so
``import closecall`` and the quick commands stay fast.
"""

from __future__ import annotations

from importlib import import_module
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

__all__ = [
    "Explanation",
    "LedgerEntries",
    "QueueQuery",
    "QueueResult",
    "Report",
    "Study",
    "UserError",
]

_WHERE = {
    "Study": "closecall.api.study",
    "QueueQuery": "closecall.review.query",
    "QueueResult": "closecall.api.results",
    "Explanation": "closecall.api.results",
    "LedgerEntries": "closecall.api.results",
    "Report": "closecall.api.results",
    "UserError": "closecall.core.errors",
}

if TYPE_CHECKING:
    from closecall.api.results import Explanation, LedgerEntries, QueueResult, Report
    from closecall.api.study import Study
    from closecall.core.errors import UserError
    from closecall.review.query import QueueQuery


def __getattr__(name: str) -> Any:
    if name in _WHERE:
        value = getattr(import_module(_WHERE[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'closecall' has no attribute '{name}'")


def __dir__() -> list[str]:
    return sorted([*globals(), *__all__])
