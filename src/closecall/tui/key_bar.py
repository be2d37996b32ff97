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

#: The same keys in words, for plain ASCII mode (no glyphs).
PLAIN_KEY_NAMES = {"enter": "enter", "down": "down", "up": "up"}


def one_key(key: str, plain: bool = False) -> str:
    """How one key is written on screen (``⏎`` for enter, ``^r`` for ctrl+r; ``enter`` when
    ``plain``)."""
    if key.startswith("ctrl+"):
        return "^" + key[5:]
    if plain and key in PLAIN_KEY_NAMES:
        return PLAIN_KEY_NAMES[key]
    return KEY_NAMES.get(key, key)


def key_label(binding: Binding, plain: bool = False) -> str:
    """How a binding's first key is written on screen."""
    first = binding.key.split(",")[0]
    if binding.key_display and not (plain and not binding.key_display.isascii()):
        return binding.key_display
    return one_key(first, plain)


def all_keys_label(binding: Binding, plain: bool = False) -> str:
    """Every key of a binding, e.g. ``↓/j``."""
    return "/".join(one_key(k.strip(), plain) for k in binding.key.split(","))


class KeyBar(Widget):
    """One line listing the screen's shown bindings; keys in bold (reverse without colour)."""

    COMPONENT_CLASSES: ClassVar[set[str]] = {"key-bar--key"}

    def __init__(self, bindings: list[BindingType], id: str | None = None) -> None:
        super().__init__(id=id)
        self._shown = [b for b in bindings if isinstance(b, Binding) and b.show]

    def render(self) -> Text:
        key_style = self.get_component_rich_style("key-bar--key", partial=True)
        plain = bool(getattr(self.app, "plain_ascii", False))
        text = Text(no_wrap=True, overflow="ellipsis")
        for i, b in enumerate(self._shown):
            if i:
                text.append(" ")
            text.append(key_label(b, plain), key_style)
            text.append(f" {b.description}")
        return text
