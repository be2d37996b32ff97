"""Two reviewers on one case: the decision dialog shows the other decision and asks.

The second reviewer is injected by replacing the login lookup (tests only); the tool takes
the login from the OS account of the process.
"""

from __future__ import annotations

import pytest
from tui_helpers import open_queue, screen_text, synchronous, wait_until

from closecall.core.vocabulary import CONFLICT
from closecall.review import decisions as reviews
from closecall.review.ledger import access
from closecall.review.states import ledger_states
from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp
from closecall.tui.conflict_prompt import ConflictPrompt
from closecall.tui.decision_dialog import DecisionDialog

SIZE = (80, 24)


async def _decide_while_alice_records(pilot, app, study, monkeypatch, answer: str) -> str:  # type: ignore[no-untyped-def]
    await open_queue(pilot)
    case_id = str(study.snapshot.case_ids[app.session.queue.order[0]])
    await pilot.press("d")
    await wait_until(pilot, lambda: isinstance(app.screen, DecisionDialog))
    dialog = app.screen
    await wait_until(pilot, lambda: dialog.seen_seq is not None)
    # alice records on the same case while bob's dialog is open
    monkeypatch.setattr(access, "current_login", lambda: "alice")
    reviews.record_review(study, case_id, "uphold", None, "Checked the employer letter")
    monkeypatch.setattr(access, "current_login", lambda: "bob")
    await pilot.press("3", "2")  # override → unfavourable, the first reason
    await pilot.press(*"bank statement contradicts")
    await pilot.press("ctrl+r")
    await wait_until(pilot, lambda: isinstance(app.screen, ConflictPrompt))
    text = screen_text(app)
    assert "Another decision on" in text and "entry 1 · alice" in text
    assert "upheld the model" in text and "Checked the employer letter" in text
    assert "replace it" in text and "second opinion" in text and "cancel" in text
    await pilot.press(answer)
    return case_id


@synchronous
async def test_cancel_records_nothing(study: OpenedStudy, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(access, "current_login", lambda: "bob")
    app = ReviewApp(study=study, login="bob")
    async with app.run_test(size=SIZE) as pilot:
        await _decide_while_alice_records(pilot, app, study, monkeypatch, "escape")
        await wait_until(pilot, lambda: isinstance(app.screen, DecisionDialog))
        await wait_until(pilot, lambda: "decided this case meanwhile" in screen_text(app))
        assert app.screen.entry is None  # type: ignore[attr-defined]
    assert [e.reviewer for e in reviews.ledger_entries(study.config)] == ["alice"]


@synchronous
async def test_second_opinion_records_beside_and_shows_conflict(
    study: OpenedStudy, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(access, "current_login", lambda: "bob")
    app = ReviewApp(study=study, login="bob")
    async with app.run_test(size=SIZE) as pilot:
        case_id = await _decide_while_alice_records(pilot, app, study, monkeypatch, "2")
        dialog = app.screen
        await wait_until(pilot, lambda: getattr(dialog, "entry", None) is not None)
        assert dialog.entry.supersedes is None  # type: ignore[attr-defined]
    row = study.snapshot.case_index(case_id)
    assert int(ledger_states(study)[row]) == CONFLICT


@synchronous
async def test_supersede_replaces_the_other_decision(
    study: OpenedStudy, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(access, "current_login", lambda: "bob")
    app = ReviewApp(study=study, login="bob")
    async with app.run_test(size=SIZE) as pilot:
        case_id = await _decide_while_alice_records(pilot, app, study, monkeypatch, "1")
        dialog = app.screen
        await wait_until(pilot, lambda: getattr(dialog, "entry", None) is not None)
        assert dialog.entry.supersedes == 1  # type: ignore[attr-defined]
    row = study.snapshot.case_index(case_id)
    assert int(ledger_states(study)[row]) != CONFLICT


@synchronous
async def test_a_draft_without_note_text_is_not_kept(study: OpenedStudy) -> None:
    from closecall.review.decisions import load_draft, my_drafts

    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        case_id = str(study.snapshot.case_ids[app.session.queue.order[0]])  # type: ignore[union-attr]
        await pilot.press("d")
        await wait_until(pilot, lambda: isinstance(app.screen, DecisionDialog))
        await pilot.press("2", "2")  # an action and a reason, then a note typed and erased
        await pilot.press(*"abc", "backspace", "backspace", "backspace")
        await pilot.pause(1.0)  # past the pause that saves drafts
        await pilot.press("escape")
        await wait_until(pilot, lambda: not isinstance(app.screen, DecisionDialog))
    assert load_draft(study, case_id) is None and my_drafts(study) == []
