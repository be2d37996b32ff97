"""A progress line for long steps: a bar of blocks, the percentage and the step's name in words."""

from __future__ import annotations

from rich.text import Text
from textual.reactive import reactive
from textual.widget import Widget


class FitProgress(Widget):
    """``█████░░░░░  40%  fitting split (2 of 5)`` — readable without colour."""

    label: reactive[str] = reactive("starting")
    done: reactive[int] = reactive(0)
    total: reactive[int] = reactive(1)

    def update_progress(self, label: str, done: int, total: int) -> None:
        self.label, self.done, self.total = label, done, max(1, total)

    def render(self) -> Text:
        width = max(10, min(40, (self.size.width or 60) - 30))
        frac = min(1.0, max(0.0, self.done / self.total))
        filled = round(frac * width)
        text = Text(no_wrap=True, overflow="ellipsis")
        text.append("█" * filled + "░" * (width - filled))
        text.append(f" {round(100 * frac):>3d}%  {self.label}")
        if self.total > 1:
            text.append(f" ({self.done} of {self.total})")
        return text
