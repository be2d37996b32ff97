"""Asked before quitting while a typed note is not recorded, or while this login has saved
drafts (it names them: they stay, unrecorded, until the reviewer opens those cases again)."""

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
    """Dismisses with True to quit, False to stay.

    Parameters
    ----------
    case_id
        The case whose typed note is not recorded; None when no note is open (quitting then
        only names the saved drafts).
    other_drafts
        Case ids of this login's other saved drafts, newest first.
    """

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("y", "answer(True)", "quit, keep the draft"),
        Binding("escape", "answer(False)", "stay", key_display="esc"),
    ]

    def __init__(self, case_id: str | None, other_drafts: list[str] | None = None) -> None:
        super().__init__()
        self.case_id = case_id
        self.other_drafts = other_drafts or []

    def compose(self) -> ComposeResult:
        with Vertical(id="confirm"):
            text = Text()
            if self.case_id is not None:
                text.append("Quit without recording?\n", "bold")
                text.append(
                    f"The note on {safe_text(self.case_id)} is not recorded in the ledger. It is "
                    "kept as a draft and comes back when you open the case again."
                )
                others = other_drafts_line(self.other_drafts)
                if others:
                    text.append("\n" + others)
            else:
                text.append("Quit with drafts not recorded?\n", "bold")
                text.append(drafts_line(self.other_drafts))
            yield Static(text, id="confirm-text")
            yield KeyBar(self.BINDINGS, id="confirm-keys")

    def action_answer(self, quit_: bool) -> None:
        self.dismiss(quit_)


def _named(case_ids: list[str]) -> str:
    n = len(case_ids)
    named = ", ".join(safe_text(c) for c in case_ids[:LISTED])
    return named + (f" and {n - LISTED} more" if n > LISTED else "")


def drafts_line(case_ids: list[str]) -> str:
    """When no note is open: which saved drafts are not recorded yet, naming the first few."""
    if len(case_ids) == 1:
        return (
            f"Your draft on {_named(case_ids)} is not recorded in the ledger. It is kept and "
            "comes back when you open the case again."
        )
    return (
        f"Your {len(case_ids)} drafts ({_named(case_ids)}) are not recorded in the ledger. "
        "They are kept and come back when you open those cases again."
    )


def other_drafts_line(case_ids: list[str]) -> str:
    """One sentence: how many saved drafts on other cases are kept, naming the first few."""
    if not case_ids:
        return ""
    n = len(case_ids)
    if n == 1:
        return (
            f"Your saved draft on another case ({_named(case_ids)}) is kept as it is: "
            "nothing is lost."
        )
    return (
        f"Your {n} saved drafts on other cases ({_named(case_ids)}) are kept as they are: "
        "nothing is lost."
    )
