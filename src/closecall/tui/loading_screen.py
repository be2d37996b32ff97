"""The first screen: opens (and if needed fits) the study in a worker, with a progress line."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import ClassVar

from textual import work
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.screen import Screen
from textual.widgets import Static
from textual.worker import get_current_worker

from closecall.api.study import Study
from closecall.core.cautions import CAUTIONS
from closecall.core.errors import UserError
from closecall.suite.opening import OpenedStudy
from closecall.tui.errors import fix_text, message_text
from closecall.tui.fit_progress import FitProgress
from closecall.tui.key_bar import KeyBar
from closecall.tui.session import ReviewSession

SessionFactory = Callable[[OpenedStudy], ReviewSession]


def prepare(session: ReviewSession, progress: Callable[[str, int, int], None]) -> None:
    """What the list needs before its first paint; the measures follow in the background."""
    progress("reading the ledger", 0, 3)
    session.refresh_reviews()
    progress("indexing case ids", 1, 3)
    session.rows_with_prefix("")
    progress("ranking the close calls", 2, 3)
    session.rebuild()
    progress("ready", 3, 3)


class LoadingScreen(Screen[None]):
    """Opens the study: fits the suite when its cached snapshot is stale, then the list."""

    BINDINGS: ClassVar[list[BindingType]] = [Binding("q,ctrl+q", "app.quit", "quit")]

    def __init__(
        self,
        config_path: Path | None,
        study: OpenedStudy | None,
        make_session: SessionFactory,
        write_demo_to: Path | None = None,
    ) -> None:
        super().__init__()
        self.config_path = config_path
        self.study = study
        self.make_session = make_session
        self.write_demo_to = write_demo_to

    def compose(self) -> ComposeResult:
        where = self.config_path or (self.study.config.path if self.study else "")
        yield Static(f"closecall review · opening {where}", id="loading-title", markup=False)
        yield Static(
            "A study whose data or config changed since its last fit is fitted again "
            "first; that can take a while on a large study.",
            id="loading-explain",
        )
        yield FitProgress(id="loading-progress")
        yield Static("", id="loading-error", markup=False)
        yield Static("\n".join(f"· {c}" for c in CAUTIONS), id="loading-cautions")
        yield KeyBar(self.BINDINGS, id="keys")

    def on_mount(self) -> None:
        self.open_in_background()

    def _progress(self, label: str, done: int, total: int) -> None:
        self.query_one(FitProgress).update_progress(label, done, total)

    @work(thread=True, exclusive=True, group="open")
    def open_in_background(self) -> None:
        worker = get_current_worker()

        def progress(label: str, done: int, total: int) -> None:
            if not worker.is_cancelled:
                self.app.call_from_thread(self._progress, label, done, total)

        try:
            study = self.study
            if study is None:
                assert self.config_path is not None
                if self.write_demo_to is not None:
                    progress("writing the demo study", 0, 1)
                    self.config_path = Study.write_demo(self.write_demo_to)
                study = Study.open(self.config_path, progress).opened
            session = self.make_session(study)
            prepare(session, progress)
        except UserError as exc:
            if not worker.is_cancelled:
                self.app.call_from_thread(self._failed, exc)
            return
        if not worker.is_cancelled:
            self.app.call_from_thread(self._ready, session)

    def _failed(self, exc: UserError) -> None:
        text = f"Could not open the study: {message_text(exc)}"
        fix = fix_text(exc)
        if fix:
            text += f"\nfix: {fix}"
        self.query_one("#loading-error", Static).update(text)

    def _ready(self, session: ReviewSession) -> None:
        from closecall.tui.queue_screen import QueueScreen

        self.app.switch_screen(QueueScreen(session))
