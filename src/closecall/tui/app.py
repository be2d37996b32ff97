"""The review app: opens a study, then the close-call list; help, ledger and commands anywhere."""

from __future__ import annotations

import asyncio
import contextlib
import signal
from collections.abc import Iterable
from pathlib import Path
from typing import ClassVar

from textual.app import App, SystemCommand
from textual.binding import Binding, BindingType
from textual.markup import escape
from textual.screen import Screen

from closecall.core.errors import UserError
from closecall.core.text import safe_text
from closecall.suite.opening import OpenedStudy
from closecall.tui.ascii_mode import AsciiFilter, ascii_wanted
from closecall.tui.decision_dialog import DecisionDialog
from closecall.tui.queue_screen import QueueScreen
from closecall.tui.session import Clock, ReviewSession, utc_clock


def _whatif_from() -> tuple[type, ...]:
    from closecall.tui.case_screen import CaseScreen
    from closecall.tui.model_screen import ModelScreen

    return (CaseScreen, ModelScreen)


class ReviewApp(App[None]):
    """``closecall review``.

    Parameters
    ----------
    config_path
        The study config to open (fitted in a worker when its snapshot is stale).
    study
        An already open study (tests, benchmarks); skips opening.
    write_demo_to
        Write the demo study into this folder first (``review --demo``).
    login, clock
        Shown as "you" and used as "now" on screen (tests inject fixed ones).
    plain_ascii
        Draw only ASCII characters (``review --ascii``); None: only when ``TERM=linux``.
    """

    CSS_PATH = "review.tcss"
    TITLE = "closecall review"
    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("ctrl+q", "quit", "quit", priority=True, show=False),
        Binding("i", "whatif", "what-if: weigh a policy change", show=False),
    ]

    def __init__(
        self,
        config_path: Path | None = None,
        *,
        study: OpenedStudy | None = None,
        write_demo_to: Path | None = None,
        login: str | None = None,
        clock: Clock = utc_clock,
        plain_ascii: bool | None = None,
    ) -> None:
        super().__init__()
        self.plain_ascii = ascii_wanted(plain_ascii)
        if self.plain_ascii:  # the same mechanism Textual uses for NO_COLOR
            self._filters.append(AsciiFilter())
        self.config_path = config_path
        self.study = study
        self.write_demo_to = write_demo_to
        self.login = login
        self.clock = clock
        self.session: ReviewSession | None = None

    def make_session(self, study: OpenedStudy) -> ReviewSession:
        self.session = ReviewSession(study, login=self.login, clock=self.clock)
        return self.session

    def on_mount(self) -> None:
        from closecall.tui.loading_screen import LoadingScreen

        self.push_screen(
            LoadingScreen(self.config_path, self.study, self.make_session, self.write_demo_to)
        )
        # not possible off the main thread (tests) or on Windows: then a hangup just ends it
        with contextlib.suppress(NotImplementedError, RuntimeError, ValueError):
            asyncio.get_running_loop().add_signal_handler(signal.SIGHUP, self._hangup)

    # ------------------------------------------------------------------ leaving

    def open_dialog(self) -> DecisionDialog | None:
        for screen in reversed(self.screen_stack):
            if isinstance(screen, DecisionDialog):
                return screen
        return None

    async def action_quit(self) -> None:
        """Quit; asks first while a typed note is not recorded or saved drafts remain (and
        names them)."""
        from closecall.tui.confirm_quit import ConfirmQuit

        if any(isinstance(s, ConfirmQuit) for s in self.screen_stack):
            return
        dialog = self.open_dialog()
        if dialog is not None and dialog.has_unrecorded_note:
            others = self._other_drafts(dialog.case_id)
            self.push_screen(ConfirmQuit(dialog.case_id, others), self._quit_answer)
            return
        drafts = self._other_drafts(dialog.case_id if dialog is not None else None)
        if drafts:
            self.push_screen(ConfirmQuit(None, drafts), self._quit_answer)
            return
        self._save_drafts()
        self.exit()

    def _other_drafts(self, case_id: str | None) -> list[str]:
        """Case ids of this login's saved drafts other than ``case_id`` (newest first)."""
        from closecall.api.study import Study

        if self.session is None:
            return []
        try:
            drafts = Study(self.session.study).my_drafts()  # one small indexed read
        except UserError:
            return []
        return [d.case_id for d in drafts if d.case_id != case_id]

    def _quit_answer(self, quit_: bool | None) -> None:
        if quit_:
            self._save_drafts()
            self.exit()

    def _save_drafts(self) -> None:
        """Before leaving: keep the open note as a draft, withdraw this session's claims."""
        from closecall.api.study import Study
        from closecall.tui.case_screen import CaseScreen

        dialog = self.open_dialog()
        if dialog is not None:
            with contextlib.suppress(UserError):
                dialog.flush_now()
        if self.session is None:
            return
        for screen in self.screen_stack:
            if isinstance(screen, (CaseScreen, DecisionDialog)):
                with contextlib.suppress(UserError):
                    Study(self.session.study).release_claim(screen.case_id, self.session.instance)

    def _hangup(self) -> None:
        """The terminal went away (SSH dropped): keep the draft, then leave."""
        self._save_drafts()
        self.exit()

    # ------------------------------------------------------------------ screens

    def action_help(self) -> None:
        from closecall.tui.help_screen import HelpScreen

        if isinstance(self.screen, HelpScreen):  # ? again closes it
            self.screen.dismiss()
            return
        if self.session is None:
            return
        snap = self.session.snap
        lenses = [lens.name for lens in snap.lenses]
        here = type(self.screen)  # help opens at this screen's keys
        help_ = HelpScreen(snap.model_names, lenses, snap.reference, here, self.plain_ascii)
        self.push_screen(help_)

    def action_ledger(self) -> None:
        from closecall.tui.ledger_screen import LedgerScreen

        if self.session is not None and not isinstance(self.screen, LedgerScreen):
            self.push_screen(LedgerScreen(self.session))

    def action_model(self) -> None:
        from closecall.tui.model_screen import ModelScreen

        if self.session is not None and not isinstance(self.screen, ModelScreen):
            self.push_screen(ModelScreen(self.session))

    def action_whatif(self) -> None:
        from closecall.tui.whatif_screen import WhatIfScreen

        if self.session is not None and isinstance(self.screen, (QueueScreen, *_whatif_from())):
            self.push_screen(WhatIfScreen(self.session))

    def show_changed_by(self, policy: str) -> None:
        """Back to the close-call list, narrowed to the cases a what-if policy changes."""
        from dataclasses import replace

        queue = self._queue_screen()
        if queue is None or self.session is None:
            return
        while self.screen is not queue:
            self.pop_screen()
        queue._apply(replace(self.session.settings, changed_by=policy))

    # ------------------------------------------------------------------ command palette

    def _queue_screen(self) -> QueueScreen | None:

        for screen in self.screen_stack:
            if isinstance(screen, QueueScreen):
                return screen
        return None

    def get_system_commands(self, screen: Screen[object]) -> Iterable[SystemCommand]:
        yield SystemCommand("Quit", "Leave closecall review", self.action_quit)
        if self.session is None:
            return
        yield SystemCommand("Help", "Keys, what each mark means, cautions", self.action_help)
        yield SystemCommand("Ledger", "Recent entries and the chain's state", self.action_ledger)
        yield SystemCommand(
            "Model weights", "Every model's weights, odds ratios, thresholds", self.action_model
        )
        yield SystemCommand(
            "What-if", "Weigh a policy change: decisions changed by group", self.action_whatif
        )
        queue = self._queue_screen()
        if queue is None:
            return
        for name in self.session.available_sorts():
            yield SystemCommand(
                f"Sort by {name}",
                f"Order the list by {name}",
                lambda n=name: queue.action_sort_by(n),
            )
        for flag, words in (
            ("flips", "cases another model or lens decides differently"),
            ("ambiguous", "cases whose band crosses the threshold"),
            ("unreviewed", "cases with no decision recorded"),
        ):
            yield SystemCommand(
                f"Only {flag}: on/off", f"Show only {words}", lambda f=flag: queue.action_switch(f)
            )
        for level in self.session.snap.group_levels:
            shown = escape(safe_text(level))  # the palette reads titles as markup
            yield SystemCommand(
                f"Only group {shown}", f"Show only {shown}", lambda g=level: queue.only_group(g)
            )
        parts = (("group", "the group attribute"), ("proxies", "the group or its proxies"))
        for part, words in parts:
            yield SystemCommand(
                f"Only decisions resting on the {part}",
                f"Cases whose decision flips without {words}",
                lambda p=part: queue.rests_on(p),
            )
        yield SystemCommand(
            "Any dependence", "Drop the resting-on filter", lambda: queue.rests_on(None)
        )
        yield SystemCommand("All groups", "Show every group", lambda: queue.only_group(None))
        yield SystemCommand("Clear filters", "Show every close call", queue.action_clear_filters)
        yield SystemCommand("Find a case by id", "Jump to an id as you type", queue.action_search)
        yield SystemCommand(
            "Read the ledger again", "Refresh review states and claims", queue.action_refresh
        )
