"""Asked when another reviewer recorded a decision on the case since this one was opened.

Shows their entry (number, author, time, action, reason, note) and offers to replace it
explicitly, to add this decision beside it as a second opinion, or to cancel (the draft is
kept). Nothing is recorded until the reviewer chooses.
"""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Static

from closecall.core.text import safe_text
from closecall.review.ledger import Entry
from closecall.tui.key_bar import KeyBar
from closecall.tui.marks import ACTION_WORD

SUPERSEDE, SECOND_OPINION = "supersede", "second-opinion"
NOTE_CHARS = 300  # of each other note shown; the ledger screen shows it in full


class ConflictPrompt(ModalScreen[str | None]):
    """Dismisses with SUPERSEDE, SECOND_OPINION or None (cancel)."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("1", "answer('supersede')", "replace theirs"),
        Binding("2", "answer('second-opinion')", "add mine beside"),
        Binding("escape", "answer(None)", "cancel, keep draft", key_display="esc"),
    ]

    def __init__(self, case_id: str, others: list[Entry]) -> None:
        super().__init__()
        self.case_id = case_id
        self.others = others

    def compose(self) -> ComposeResult:
        with Vertical(id="confirm"):
            yield Static(conflict_text(self.case_id, self.others), id="confirm-text")
            yield KeyBar(self.BINDINGS, id="confirm-keys")

    def action_answer(self, answer: str | None) -> None:
        self.dismiss(answer)


def conflict_text(case_id: str, others: list[Entry]) -> Text:
    """The other decisions in words, then the three choices."""
    text = Text()
    text.append(f"Another decision on {safe_text(case_id)}\n", "bold")
    for e in others:
        when = e.time[:16].replace("T", " ") + " UTC"
        reason = f" ({safe_text(e.reason)})" if e.reason else ""
        text.append(f"entry {e.seq} · {safe_text(e.reviewer)} · {when}\n", "bold")
        text.append(f"{ACTION_WORD.get(e.action, e.action)}{reason}\n")
        note = safe_text(" ".join(e.note.split()))
        if len(note) > NOTE_CHARS:
            note = note[: NOTE_CHARS - 1] + "…"
        text.append(f'note: "{note}"\n' if note else "no note\n")
    first = others[0].seq
    text.append(f"\n1  replace it: your entry supersedes entry {first}\n")
    text.append("2  second opinion: yours stands beside it (a disagreement shows as conflict)\n")
    text.append("esc  cancel: nothing recorded, your draft is kept")
    return text
