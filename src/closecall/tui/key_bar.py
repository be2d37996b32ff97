"""The bottom line: the keys that matter on this screen, as key + word pairs."""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual.binding import Binding, BindingType
from textual.widget import Widget

KEY_NAMES = {
    "enter": "⏎",
    "escape": "esc",
    "question_mark": "?",
    "slash": "/",
    "space": "space",
    "tab": "tab",
    "down": "↓",
    "up": "↑",
    "pagedown": "PgDn",
    "pageup": "PgUp",
    "home": "Home",
    "end": "End",
}


def one_key(key: str) -> str:
    """How one key is written on screen (``⏎`` for enter, ``^r`` for ctrl+r)."""
    if key.startswith("ctrl+"):
        return "^" + key[5:]
    return KEY_NAMES.get(key, key)


def key_label(binding: Binding) -> str:
    """How a binding's first key is written on screen."""
    return binding.key_display or one_key(binding.key.split(",")[0])


def all_keys_label(binding: Binding) -> str:
    """Every key of a binding, e.g. ``↓/j``."""
    return "/".join(one_key(k.strip()) for k in binding.key.split(","))


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
