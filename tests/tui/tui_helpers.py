"""Helpers for driving the review app in tests."""

from __future__ import annotations

import asyncio
import functools
import io
from collections.abc import Callable, Coroutine
from typing import Any

from rich.console import Console
from textual.app import App
from textual.pilot import Pilot


async def wait_until(
    pilot: Pilot[None], condition: Callable[[], bool], timeout: float = 20.0
) -> None:
    """Let the app run until ``condition()`` holds (workers finish in threads)."""
    waited = 0.0
    while not condition():
        if waited > timeout:
            raise AssertionError(f"timed out after {timeout}s waiting for {condition}")
        await pilot.pause(0.05)
        waited += 0.05
    await pilot.pause()


async def open_queue(pilot: Pilot[None]) -> None:
    from closecall.tui.queue_screen import QueueScreen

    await wait_until(pilot, lambda: isinstance(pilot.app.screen, QueueScreen))


def screen_text(app: App[None]) -> str:
    """What the terminal shows, as plain text (no colour)."""
    width, height = app.size
    console = Console(
        width=width,
        height=height,
        file=io.StringIO(),
        force_terminal=True,
        color_system=None,
        record=True,
        legacy_windows=False,
        safe_box=False,
    )
    update = app.screen._compositor.render_update(
        full=True, screen_stack=app._background_screens, simplify=True
    )
    console.print(update)
    return console.export_text()


def synchronous(test: Callable[..., Coroutine[Any, Any, None]]) -> Callable[..., None]:
    """Run an async test body with asyncio.run (no pytest plugin needed)."""

    @functools.wraps(test)
    def run(*args: Any, **kwargs: Any) -> None:
        asyncio.run(test(*args, **kwargs))

    return run
