"""Drafts and claims in the review screen (issue 16, item 6): a restored draft is typed on at its
end, the list counts this login's drafts and quitting names them, and a review screen that exits
releases only the claims it holds itself (not those a newer screen of the same login took)."""

from __future__ import annotations

from tui_helpers import open_queue, screen_text, synchronous, wait_until

from closecall.review.decisions import active_claims, claim_case, load_draft, save_draft
from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp
from closecall.tui.case_list import CaseList
from closecall.tui.case_screen import CaseScreen
from closecall.tui.confirm_quit import ConfirmQuit
from closecall.tui.decision_dialog import DecisionDialog

SIZE = (100, 30)


def _current_case(app: ReviewApp, study: OpenedStudy) -> str:
    row = app.screen.query_one(CaseList).current_row
    assert row is not None
    return str(study.snapshot.case_ids[row])


@synchronous
async def test_typing_after_a_restored_draft_appends_to_the_note(study: OpenedStudy) -> None:
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        case_id = _current_case(app, study)
        save_draft(study, case_id, "Line one\nIncome letter seen", "defer", None)
        await pilot.press("d")
        await wait_until(pilot, lambda: isinstance(app.screen, DecisionDialog))
        dialog = app.screen
        assert isinstance(dialog, DecisionDialog)
        await wait_until(pilot, lambda: "draft restored" in screen_text(app))
        assert app.focused is dialog.query_one("#note")  # focus in the note, not the list
        await pilot.press(*"; 3 May")  # "3" would pick an action if the list had focus
        assert dialog.value().note == "Line one\nIncome letter seen; 3 May"
        assert dialog.value().action == "defer"
        await pilot.press("escape")  # close, keep the draft
        await wait_until(pilot, lambda: not isinstance(app.screen, DecisionDialog))
    draft = load_draft(study, case_id)
    assert draft is not None and draft.note == "Line one\nIncome letter seen; 3 May"


@synchronous
async def test_the_list_counts_my_drafts_and_quitting_names_them(study: OpenedStudy) -> None:
    ids = [str(c) for c in study.snapshot.case_ids[:4]]
    for i, case_id in enumerate(ids[:2]):
        save_draft(study, case_id, f"draft {i}")
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        await wait_until(pilot, lambda: "2 drafts" in screen_text(app))
        await pilot.press("q")
        await wait_until(pilot, lambda: isinstance(app.screen, ConfirmQuit))
        box = " ".join(screen_text(app).split())
        assert f"Your 2 drafts ({ids[1]}, {ids[0]}) are not recorded" in box  # newest first
        await pilot.press("escape")  # stay
        await wait_until(pilot, lambda: not isinstance(app.screen, ConfirmQuit))
        assert app.is_running
        # a third draft left by closing the dialog is counted on the list at once
        await pilot.press("d")
        await wait_until(pilot, lambda: isinstance(app.screen, DecisionDialog))
        await wait_until(pilot, lambda: not app.screen._loading)  # type: ignore[attr-defined]
        await pilot.press("tab", "tab", *"third")
        await pilot.press("escape")
        await wait_until(pilot, lambda: "3 drafts" in screen_text(app))
        await pilot.press("q")
        await wait_until(pilot, lambda: isinstance(app.screen, ConfirmQuit))
        await pilot.press("y")
        await wait_until(pilot, lambda: not app.is_running)
    assert all(load_draft(study, c) is not None for c in ids[:2])  # kept, not recorded


@synchronous
async def test_quit_without_drafts_does_not_ask_and_the_count_is_absent(
    study: OpenedStudy,
) -> None:
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        counts = next(line for line in screen_text(app).splitlines() if "claimed" in line)
        assert "draft" not in counts
        await pilot.press("q")
        await wait_until(pilot, lambda: not app.is_running)


async def _open_first_case(pilot, app: ReviewApp) -> None:  # type: ignore[no-untyped-def]
    await open_queue(pilot)
    await pilot.press("enter")
    await wait_until(pilot, lambda: isinstance(app.screen, CaseScreen))
    await wait_until(pilot, lambda: app.screen.details is not None)  # type: ignore[attr-defined]


@synchronous
async def test_an_old_screen_exiting_keeps_the_claim_a_newer_one_holds(
    study: OpenedStudy,
) -> None:
    old = ReviewApp(study=study, login="reviewer")
    async with old.run_test(size=SIZE) as pilot:
        await _open_first_case(pilot, old)
        case_id = old.screen.case_id  # type: ignore[attr-defined]
        assert [c.reviewer for c in active_claims(study)[case_id]]  # the old screen's claim
        new = ReviewApp(study=study, login="reviewer")  # the same login reconnects
        async with new.run_test(size=SIZE) as pilot_new:
            await _open_first_case(pilot_new, new)
            assert new.screen.case_id == case_id  # type: ignore[attr-defined]
            assert new.session is not None and old.session is not None
            assert new.session.instance != old.session.instance
            claims = active_claims(study)[case_id]
            assert [c.instance for c in claims] == [new.session.instance]
            await pilot.press("ctrl+q")  # the frozen old screen finally exits
            await wait_until(pilot, lambda: not old.is_running)
            assert [c.instance for c in active_claims(study).get(case_id, [])] == [
                new.session.instance
            ]  # the live screen's claim stays
            await pilot_new.press("ctrl+q")
            await wait_until(pilot_new, lambda: not new.is_running)
    assert case_id not in active_claims(study)  # the live one released its own on exit


def test_release_with_an_instance_leaves_another_instances_claim(study: OpenedStudy) -> None:
    case_id = str(study.snapshot.case_ids[0])
    claim_case(study, case_id, "screen-a")
    claim_case(study, case_id, "screen-b")  # the same login, a newer screen: it holds it now
    from closecall.review.decisions import release_claim

    release_claim(study, case_id, "screen-a")
    assert [c.instance for c in active_claims(study)[case_id]] == ["screen-b"]
    release_claim(study, case_id, "screen-b")
    assert case_id not in active_claims(study)
    claim_case(study, case_id, "screen-c")
    release_claim(study, case_id)  # no instance (engine callers): the login's claim goes
    assert case_id not in active_claims(study)
