"""Progress reporting for long engine steps: a callback the views turn into a bar."""

from __future__ import annotations

from collections.abc import Callable

#: fn(label, done, total): called as a long step advances.
Progress = Callable[[str, int, int], None]


def quiet(label: str, done: int, total: int) -> None:
    """A progress callback that shows nothing."""
    return None
