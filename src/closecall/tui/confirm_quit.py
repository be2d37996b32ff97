"""Asked before quitting while a typed note is not recorded."""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Static

from closecall.tui.key_bar import KeyBar


class ConfirmQuit(ModalScreen[bool]):
    """Dismisses with True to quit, False to stay."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("y", "answer(True)", "quit, keep the draft"),
        Binding("n,escape", "answer(False)", "stay"),
    ]

    def __init__(self, case_id: str) -> None:
        super().__init__()
        self.case_id = case_id

    def compose(self) -> ComposeResult:
        with Vertical(id="confirm"):
            text = Text()
            text.append("Quit without recording?\n", "bold")
            text.append(
                f"The note on {self.case_id} is not recorded in the ledger. It is kept as a "
                "draft and comes back when you open the case again."
            )
            yield Static(text, id="confirm-text")
            yield KeyBar(self.BINDINGS, id="confirm-keys")

    def action_answer(self, quit_: bool) -> None:
        self.dismiss(quit_)
