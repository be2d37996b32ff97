"""Asked before quitting while a typed note is not recorded (and which other drafts stay)."""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Static

from closecall.core.text import safe_text
from closecall.tui.key_bar import KeyBar

LISTED = 3  # other drafts named by case id; the rest are counted


class ConfirmQuit(ModalScreen[bool]):
    """Dismisses with True to quit, False to stay."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("y", "answer(True)", "quit, keep the draft"),
        Binding("escape", "answer(False)", "stay", key_display="esc"),
    ]

    def __init__(self, case_id: str, other_drafts: list[str] | None = None) -> None:
        super().__init__()
        self.case_id = case_id
        self.other_drafts = other_drafts or []

    def compose(self) -> ComposeResult:
        with Vertical(id="confirm"):
            text = Text()
            text.append("Quit without recording?\n", "bold")
            text.append(
                f"The note on {self.case_id} is not recorded in the ledger. It is kept as a "
                "draft and comes back when you open the case again."
            )
            others = other_drafts_line(self.other_drafts)
            if others:
                text.append("\n" + others)
            yield Static(text, id="confirm-text")
            yield KeyBar(self.BINDINGS, id="confirm-keys")

    def action_answer(self, quit_: bool) -> None:
        self.dismiss(quit_)


def other_drafts_line(case_ids: list[str]) -> str:
    """One sentence: how many saved drafts on other cases are kept, naming the first few."""
    if not case_ids:
        return ""
    n = len(case_ids)
    named = ", ".join(safe_text(c) for c in case_ids[:LISTED])
    rest = f" and {n - LISTED} more" if n > LISTED else ""
    if n == 1:
        return f"Your saved draft on another case ({named}) is kept as it is: nothing is lost."
    return (
        f"Your {n} saved drafts on other cases ({named}{rest}) are kept as they are: "
        "nothing is lost."
    )
