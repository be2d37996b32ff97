"""The main review flows, driven with Textual's pilot at 80×24."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from tui_helpers import open_queue, screen_text, synchronous, wait_until

from closecall.review.decisions import ledger_entries, load_draft
from closecall.review.queue import decision_grid
from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp
from closecall.tui.case_list import CaseList
from closecall.tui.case_screen import CaseScreen
from closecall.tui.confirm_quit import ConfirmQuit
from closecall.tui.decision_dialog import DecisionDialog
from closecall.tui.ledger_screen import LedgerScreen

SIZE = (80, 24)
NOTE = "Income letter seen; 3 May."


def _dialog(app: ReviewApp) -> DecisionDialog:
    screen = app.screen
    assert isinstance(screen, DecisionDialog)
    return screen


@synchronous
async def test_flips_case_override_then_ledger(study: OpenedStudy, study_config: Path, cli) -> None:  # type: ignore[no-untyped-def]
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        session = app.session
        assert session is not None
        await pilot.press("f")
        await wait_until(pilot, lambda: session.settings.flips)
        listed = session.queue.order  # type: ignore[union-attr]
        flips = decision_grid(study.snapshot).flip
        # every listed case is a flip, and every flip is listed (the demo's close calls)
        assert flips[listed].all()
        assert len(listed) == int(flips.sum())
        assert f"{len(listed):,} listed" in screen_text(app)

        cases = app.screen.query_one(CaseList)
        await pilot.press("j", "j")
        row = cases.current_row
        assert row == int(listed[2])
        case_id = str(study.snapshot.case_ids[row])
        await pilot.press("enter")
        await wait_until(pilot, lambda: isinstance(app.screen, CaseScreen))
        await wait_until(pilot, lambda: app.screen.details is not None)  # type: ignore[attr-defined]
        assert f"Case {case_id}" in screen_text(app)

        await pilot.press("d")
        await wait_until(pilot, lambda: isinstance(app.screen, DecisionDialog))
        await pilot.press("2")  # override → favourable; focus moves to the reason list
        await pilot.press("2")  # the first configured reason; focus moves to the note
        reason = study.config.review.reasons[0]
        await pilot.press(*NOTE)
        await pilot.press("ctrl+r")
        dialog = _dialog(app)
        await wait_until(pilot, lambda: dialog.entry is not None)
        entry = dialog.entry
        assert entry is not None
        assert (entry.case_id, entry.action, entry.reason, entry.note) == (
            case_id,
            "override-favourable",
            reason,
            NOTE,
        )
        assert entry.hash in screen_text(app)  # the dialog shows the new entry's hash

        await pilot.press("enter")  # back to the case
        await wait_until(pilot, lambda: isinstance(app.screen, CaseScreen))
        await pilot.press("l")
        await wait_until(pilot, lambda: isinstance(app.screen, LedgerScreen))
        ledger_screen = app.screen
        assert isinstance(ledger_screen, LedgerScreen)
        await wait_until(pilot, lambda: bool(ledger_screen.entries))
        await wait_until(pilot, lambda: "verified" in screen_text(app))
        text = screen_text(app)
        assert case_id in text and "▲ →fav" in text and "chain ✓ verified · 1 entries" in text

    shown = cli("ledger", "show", "--json", "--config", str(study_config))
    assert shown.code == 0, shown
    rows = json.loads(shown.out)["rows"]
    assert [(r["case_id"], r["action"], r["note"], r["hash"]) for r in rows] == [
        (case_id, "override-favourable", NOTE, entry.hash)
    ]


@synchronous
async def test_override_without_note_is_refused(study: OpenedStudy) -> None:
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        await pilot.press("d")
        await wait_until(pilot, lambda: isinstance(app.screen, DecisionDialog))
        await pilot.press("3", "2")  # override → unfavourable, a reason, no note
        await pilot.press("ctrl+r")
        await wait_until(pilot, lambda: "not recorded" in screen_text(app))
        text = screen_text(app)
        assert "needs a note" in text and "write a note below" in text
        assert _dialog(app).entry is None
        await pilot.press("escape")  # close: nothing typed, nothing kept
        await wait_until(pilot, lambda: not isinstance(app.screen, DecisionDialog))
    assert ledger_entries(study.config) == []


@synchronous
async def test_override_without_reason_is_refused(study: OpenedStudy) -> None:
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        await pilot.press("d")
        await wait_until(pilot, lambda: isinstance(app.screen, DecisionDialog))
        await pilot.press("2", "1")  # override → favourable, reason "— none —"
        await pilot.press(*"a note")
        await pilot.press("ctrl+r")
        await wait_until(pilot, lambda: "not recorded" in screen_text(app))
        assert "needs a reason code" in screen_text(app)
    assert ledger_entries(study.config) == []


@synchronous
async def test_draft_survives_quit_and_comes_back(study: OpenedStudy) -> None:
    typed = "Half-written: await letter"
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        case_id = str(study.snapshot.case_ids[app.screen.query_one(CaseList).current_row])
        await pilot.press("d")
        await wait_until(pilot, lambda: isinstance(app.screen, DecisionDialog))
        await pilot.press("4")  # defer
        await pilot.press("1")  # no reason
        await pilot.press(*typed)
        await pilot.press("ctrl+q")
        await wait_until(pilot, lambda: isinstance(app.screen, ConfirmQuit))  # asks first
        assert "not recorded" in screen_text(app)
        await pilot.press("y")
        await wait_until(pilot, lambda: not app.is_running)
    draft = load_draft(study, case_id)
    assert draft is not None and (draft.note, draft.action) == (typed, "defer")
    assert ledger_entries(study.config) == []

    again = ReviewApp(study=study, login="reviewer")
    async with again.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        await pilot.press("enter")
        await wait_until(pilot, lambda: isinstance(again.screen, CaseScreen))
        await wait_until(pilot, lambda: again.screen.details is not None)  # type: ignore[attr-defined]
        await pilot.press("pagedown", "pagedown", "pagedown")
        assert "not recorded yet · defer" in screen_text(again)  # the case screen shows it
        await pilot.press("d")
        await wait_until(pilot, lambda: isinstance(again.screen, DecisionDialog))
        dialog = _dialog(again)
        await wait_until(pilot, lambda: "draft restored" in screen_text(again))
        assert dialog.value().note == typed
        assert dialog.value().action == "defer"


@synchronous
async def test_draft_is_saved_while_typing(study: OpenedStudy) -> None:
    """No quit, no close: a pause in typing is enough (a dropped connection loses nothing)."""
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        case_id = str(study.snapshot.case_ids[app.screen.query_one(CaseList).current_row])
        await pilot.press("d")
        await wait_until(pilot, lambda: isinstance(app.screen, DecisionDialog))
        await pilot.press("tab", "tab")  # to the note
        await pilot.press(*"checked the file")
        await wait_until(pilot, lambda: "draft saved" in screen_text(app))
        draft = load_draft(study, case_id)
        assert draft is not None and draft.note == "checked the file"
        await pilot.press("ctrl+q", "y")


@synchronous
async def test_quit_without_a_note_does_not_ask(study: OpenedStudy) -> None:
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        await pilot.press("q")
        await wait_until(pilot, lambda: not app.is_running)


@synchronous
async def test_search_by_id_moves_the_cursor(study: OpenedStudy) -> None:
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        session = app.session
        assert session is not None and session.queue is not None
        cases = app.screen.query_one(CaseList)
        target = str(study.snapshot.case_ids[session.queue.order[40]])
        await pilot.press("slash", *target)
        await wait_until(pilot, lambda: cases.current_row == int(session.queue.order[40]))  # type: ignore[union-attr]
        await pilot.press("enter")
        assert cases.has_focus
        # a prefix matching nothing says so and leaves the cursor where it is
        await pilot.press("slash", *"ZZ-none")
        await wait_until(pilot, lambda: "no case id starts with" in screen_text(app))
        await pilot.press("escape")
        assert cases.current_row == int(session.queue.order[40])


@synchronous
async def test_sort_and_unreviewed_filter(study: OpenedStudy) -> None:
    from closecall.review.decisions import record_review

    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        session = app.session
        assert session is not None and session.queue is not None
        first = str(study.snapshot.case_ids[session.queue.order[0]])
        record_review(study, first, "uphold", None, "")
        await pilot.press("r")  # read the ledger again
        await wait_until(pilot, lambda: session.counts()["reviewed"] == 1)
        await pilot.press("u")
        await wait_until(pilot, lambda: session.settings.unreviewed)
        assert first not in {str(study.snapshot.case_ids[r]) for r in session.queue.order}  # type: ignore[union-attr]
        await pilot.press("s", "s")  # triage (the default), flips first, ambiguity
        await wait_until(pilot, lambda: session.queue.sort == "ambiguity")  # type: ignore[union-attr]
        ambiguity = session.measure("ambiguity")
        assert ambiguity is not None
        shown = ambiguity[session.queue.order[:50]]  # type: ignore[union-attr]
        assert np.all(np.diff(shown) <= 1e-12)  # most ambiguous first
        await pilot.press("s")
        await wait_until(pilot, lambda: session.queue.sort == "dependence")  # type: ignore[union-attr]
        await pilot.press("g")
        await wait_until(pilot, lambda: session.settings.group == study.snapshot.group_levels[0])
        level = study.snapshot.group_levels[0]
        assert set(study.snapshot.group_labels[session.queue.order]) == {level}  # type: ignore[union-attr]


@pytest.mark.parametrize("size", [(80, 24), (120, 40)])
@synchronous
async def test_help_lists_keys_meanings_and_cautions(
    study: OpenedStudy, size: tuple[int, int]
) -> None:
    from closecall.core.cautions import CAUTIONS
    from closecall.tui.help_screen import HelpScreen, help_text

    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=size) as pilot:
        await open_queue(pilot)
        await pilot.press("question_mark")
        await wait_until(pilot, lambda: isinstance(app.screen, HelpScreen))
        assert "Keys" in screen_text(app)
    snap = study.snapshot
    text = help_text(snap.model_names, [lens.name for lens in snap.lenses], snap.reference).plain
    for caution in CAUTIONS:
        assert caution in text
    for word in ("margin", "flip", "band", "dependence", "counterpart", "ledger"):
        assert f"  {word}" in text


@synchronous
async def test_meaning_survives_without_colour(
    study: OpenedStudy, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Under NO_COLOR the cursor, switches, decisions and states still read as signs and words."""
    monkeypatch.setenv("NO_COLOR", "1")
    app = ReviewApp(study=study, login="reviewer")
    assert app.no_color
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        await pilot.press("f")
        await wait_until(pilot, lambda: "f flips: any" in screen_text(app))
        lines = screen_text(app).splitlines()
        cursor_rows = [line for line in lines if line.startswith("▶")]
        assert len(cursor_rows) == 1
        assert "open" in cursor_rows[0] and "on the line" in cursor_rows[0]  # distance in words
        assert "a ambiguous ○" in screen_text(app)


@synchronous
async def test_leaving_withdraws_the_claim(study: OpenedStudy) -> None:
    from closecall.review.decisions import active_claims

    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        await pilot.press("enter")
        await wait_until(pilot, lambda: isinstance(app.screen, CaseScreen))
        case_id = app.screen.case_id  # type: ignore[attr-defined]
        await wait_until(pilot, lambda: case_id in active_claims(study))
        await pilot.press("ctrl+q")
        await wait_until(pilot, lambda: not app.is_running)
    assert case_id not in active_claims(study)


@synchronous
async def test_command_palette_runs_the_apps_actions(study: OpenedStudy) -> None:
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        session = app.session
        assert session is not None
        await pilot.press("ctrl+p")
        await pilot.press(*"only flips")
        await wait_until(pilot, lambda: "Only flips" in screen_text(app))
        await pilot.press("enter")
        await wait_until(pilot, lambda: session.settings.flips)
        await pilot.press("ctrl+p")
        await pilot.press(*"ledger")
        await wait_until(pilot, lambda: "Recent entries" in screen_text(app))
        await pilot.press("enter")
        await wait_until(pilot, lambda: isinstance(app.screen, LedgerScreen))


@synchronous
async def test_a_stale_study_is_fitted_with_progress(tmp_path: Path) -> None:
    from closecall.setup.demo import write_demo
    from closecall.tui.fit_progress import FitProgress
    from closecall.tui.queue_screen import QueueScreen

    config = write_demo(tmp_path / "small", cases=400, seed=3)
    seen: list[str] = []
    app = ReviewApp(config, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        widget = app.screen.query_one(FitProgress)
        while not isinstance(app.screen, QueueScreen):
            seen.append(widget.label)
            await pilot.pause(0.01)
        assert app.session is not None and app.session.study.fitted_now
    assert len(set(seen)) >= 3  # the progress line moved through the fitting steps
    assert (config.parent / ".closecall" / "snapshots").is_dir()


def test_chain_state_names_the_broken_entry() -> None:
    from closecall.review.ledger import Problem, VerifyResult
    from closecall.tui.ledger_screen import chain_state

    problem = Problem("edited", 7, "entry 7: its fields do not match its hash")
    broken = VerifyResult(False, 12, 6, 12, "ab" * 32, problem, None, None, (problem,))
    assert chain_state(broken) == (
        "chain ✗ BROKEN at entry 7 (6 good before it): entry 7: its fields do not match its hash"
    )
    ok = VerifyResult(True, 3, 3, 3, "cd" * 32, None, None, None)
    assert chain_state(ok) == "chain ✓ verified · 3 entries · head 3 cdcdcdcdcdcdcdcd…"


@synchronous
async def test_a_warm_up_that_ends_after_the_screen_went_is_ignored(study: OpenedStudy) -> None:
    """The list's warm-up (a thread) ends by redrawing the list; when the app has quit
    meanwhile, that redraw finds no list and must do nothing (it raised NoMatches)."""
    from closecall.tui.queue_screen import QueueScreen

    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        screen = app.screen
        assert isinstance(screen, QueueScreen)
    screen._measured()  # what call_from_thread runs when the warm-up ends late


@synchronous
async def test_keys_that_arrive_together_choose_in_each_list_in_turn(study: OpenedStudy) -> None:
    """Over a slow link keys arrive together: "3 2 x" reaches the app before the action list
    has handled "3". The action list takes the 3, the reason list the 2, the note the x (it
    took 1 then 2 as actions, leaving no reason)."""
    from textual import events
    from textual.widgets import TextArea

    from closecall.tui.choice_list import ChoiceList

    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        await pilot.press("d")
        await wait_until(pilot, lambda: isinstance(app.screen, DecisionDialog))
        await pilot.pause()
        for key in "32x":  # all three queued before any is handled
            app.post_message(events.Key(key, key))
        dialog = _dialog(app)
        note = dialog.query_one("#note", TextArea)
        await wait_until(pilot, lambda: note.text == "x", timeout=5.0)
        assert dialog.query_one("#action", ChoiceList).chosen == 2  # override → unfavourable
        assert dialog.query_one("#reason", ChoiceList).chosen == 1  # the first reason code
