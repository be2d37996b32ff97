"""A short list of options where one is chosen: ``◉`` marks the choice, ``▸`` the cursor.

Both marks are glyphs, so the list reads the same without colour. Enter chooses the option
under the cursor; a digit chooses that option directly (space is page down on every other
screen, so it chooses nothing here). A list made with ``hand_to`` passes the focus to that
widget as soon as a choice is made, within the same key press, and passes on the keys that
were typed after it but reached the list before the focus had moved: typing ``2 1`` quickly
(or over a slow link, where keys arrive together) chooses in two lists, never twice in one,
and a note typed straight after loses no letter.
"""

from __future__ import annotations

from textual import events
from textual.message import Message
from textual.widget import Widget
from textual.widgets import OptionList
from textual.widgets.option_list import Option

CHOSEN, NOT_CHOSEN, POINTER = "◉", "○", "▸"


class ChoiceList(OptionList):
    """Options with values; ``chosen`` is the index of the chosen one (None: nothing yet)."""

    class Chosen(Message):
        def __init__(self, choice_list: ChoiceList, value: str | None) -> None:
            super().__init__()
            self.choice_list = choice_list
            self.value = value

        @property
        def control(self) -> ChoiceList:
            return self.choice_list

    def __init__(
        self,
        choices: list[tuple[str | None, str]],
        chosen: int | None = None,
        *,
        id: str | None = None,
        hand_to: str | None = None,
    ) -> None:
        self.values = [v for v, _ in choices]
        self.hand_to = hand_to
        self._passed_to: Widget | None = None
        self.labels = [label for _, label in choices]
        self.chosen = chosen
        self._focused = False
        prompts = [Option(self._prompt(i, pointer=False)) for i in range(len(choices))]
        super().__init__(*prompts, id=id)

    def _prompt(self, i: int, pointer: bool = True) -> str:
        pointer = pointer and self.highlighted == i and self._focused
        mark = CHOSEN if i == self.chosen else NOT_CHOSEN
        key = f"{i + 1}" if i < 9 else " "
        return f"{POINTER if pointer else ' '}{mark} {key} {self.labels[i]}"

    def _redraw(self) -> None:
        for i in range(len(self.labels)):
            self.replace_option_prompt_at_index(i, self._prompt(i))

    @property
    def value(self) -> str | None:
        return None if self.chosen is None else self.values[self.chosen]

    def choose(self, index: int | None, announce: bool = True) -> None:
        self.chosen = index
        if index is not None:
            self.highlighted = index
        self._redraw()
        if announce:
            self.post_message(self.Chosen(self, self.value))

    def choose_value(self, value: str | None) -> None:
        if value in self.values:
            self.choose(self.values.index(value), announce=False)

    def watch_highlighted(self, highlighted: int | None) -> None:
        super().watch_highlighted(highlighted)
        self._redraw()

    def _hand_over(self) -> None:
        """Focus ``hand_to`` now (not when a message about the choice is handled)."""
        if self.hand_to is None or self.screen.focused is not self:
            return
        target = self.screen.query_one(f"#{self.hand_to}")
        self.screen.set_focus(target)  # at once (Widget.focus waits for the next refresh)
        self._passed_to = target

    def on_focus(self) -> None:
        self._passed_to = None
        self._focused = True
        if self.highlighted is None:
            self.highlighted = self.chosen or 0
        self._redraw()

    def on_blur(self) -> None:
        self._focused = False
        self._redraw()

    def on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        event.stop()
        self.choose(event.option_index)
        self._hand_over()

    def on_key(self, event: events.Key) -> None:
        if self._passed_to is not None and self.screen.focused is not self:  # set at once
            event.stop()  # typed after the choice, sent here before the focus moved: pass it on
            event.prevent_default()
            self._passed_to.post_message(events.Key(event.key, event.character))
            return
        if event.character and event.character.isdigit():
            i = int(event.character) - 1
            if 0 <= i < len(self.labels):
                event.stop()
                self.choose(i)
                self._hand_over()
