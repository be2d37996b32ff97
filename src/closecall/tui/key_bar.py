"""The bottom line: the keys that matter on this screen, as key + word pairs."""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual.binding import Binding, BindingType
from textual.widget import Widget


def key_label(binding: Binding) -> str:
    """How a binding's first key is written on screen (``⏎`` for enter, ``^s`` for ctrl+s)."""
    if binding.key_display:
        return binding.key_display
    key = binding.key.split(",")[0]
    names = {
        "enter": "⏎",
        "escape": "esc",
        "question_mark": "?",
        "slash": "/",
        "space": "space",
        "tab": "tab",
    }
    if key.startswith("ctrl+"):
        return "^" + key[5:]
    return names.get(key, key)


class KeyBar(Widget):
    """One line listing the screen's shown bindings; keys in bold (reverse without colour)."""

    COMPONENT_CLASSES: ClassVar[set[str]] = {"key-bar--key"}

    def __init__(self, bindings: list[BindingType], id: str | None = None) -> None:
        super().__init__(id=id)
        self._shown = [b for b in bindings if isinstance(b, Binding) and b.show]

    def render(self) -> Text:
        key_style = self.get_component_rich_style("key-bar--key", partial=True)
        text = Text(no_wrap=True, overflow="ellipsis")
        for i, b in enumerate(self._shown):
            if i:
                text.append(" ")
            text.append(f"{key_label(b)}", key_style)
            text.append(f" {b.description}")
        return text
