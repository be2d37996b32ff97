"""Keeps the note being typed in the ledger's drafts table, saving the latest text only.

The dialog hands every change to :meth:`DraftKeeper.update` (cheap, any thread) and asks for a
save after a pause in typing; :meth:`flush` runs in a worker thread and writes the newest value
(older ones that were overtaken are skipped, and saves never overlap or run out of order).
"""

from __future__ import annotations

import threading
from dataclasses import dataclass

from closecall.api.study import Study
from closecall.suite.opening import OpenedStudy


@dataclass(frozen=True)
class DraftValue:
    note: str
    action: str | None
    reason: str | None

    @property
    def empty(self) -> bool:
        """No note text: nothing worth keeping (a chosen action or reason alone is not kept)."""
        return not self.note.strip()


class DraftKeeper:
    """The unsaved state of one case's draft."""

    def __init__(self, study: OpenedStudy, case_id: str, saved: DraftValue | None = None) -> None:
        self.study = study
        self.case_id = case_id
        self._lock = threading.Lock()
        self._writing = threading.Lock()
        self._pending: DraftValue | None = None
        self._saved = saved or DraftValue("", None, None)
        self.closed = False

    def update(self, value: DraftValue) -> None:
        with self._lock:
            if not self.closed:
                self._pending = value if value != self._saved else None

    @property
    def unsaved(self) -> bool:
        with self._lock:
            return self._pending is not None

    @property
    def saved(self) -> DraftValue:
        return self._saved

    def close(self) -> None:
        """Stop saving (the note was recorded: the ledger has dropped the draft)."""
        with self._lock:
            self.closed = True
            self._pending = None

    def flush(self) -> DraftValue | None:
        """Write the newest pending value (blocking); returns what was written, if anything."""
        written = None
        with self._writing:
            while True:
                with self._lock:
                    value, self._pending = self._pending, None
                    if value is None or self.closed:
                        return written
                if value.empty:
                    Study(self.study).drop_draft(self.case_id)
                else:
                    Study(self.study).save_draft(
                        self.case_id, value.note, value.action, value.reason
                    )
                self._saved = written = value
