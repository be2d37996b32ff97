"""Paging back through a long ledger, and the quit question naming the other drafts (80×24)."""

from __future__ import annotations

import functools

from tui_helpers import open_queue, screen_text, synchronous, wait_until

from closecall.review.decisions import save_draft
from closecall.review.ledger import EntryContent, open_ledger
from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp
from closecall.tui.case_list import CaseList
from closecall.tui.confirm_quit import ConfirmQuit
from closecall.tui.decision_dialog import DecisionDialog
from closecall.tui.ledger_screen import PAGE, LedgerScreen

SIZE = (80, 24)
ENTRIES = 2_300  # five pages: four of 500 and one of 300


def _fill_ledger(study: OpenedStudy, n: int) -> None:
    """``n`` real entries, appended through the store, by two reviewers over real case ids."""
    ids = study.snapshot.case_ids
    with open_ledger(study.config.review.ledger) as ledger:
        for i in range(n):
            ledger.append(
                EntryContent(
                    reviewer="ann" if i % 3 else "bo",
                    case_id=str(ids[i % len(ids)]),
                    snapshot_id=str(study.snapshot.id),
                    current_snapshot_id=None,
                    reference_model=str(study.snapshot.reference),
                    reference_decision="favourable",
                    reference_margin=0.25,
                    decisions={"pooled": {"decision": "favourable", "margin": 0.25}},
                    action="uphold" if i % 2 else "defer",
                    reason=None,
                    note=f"entry number {i + 1}",
                )
            )


def _box(text: str, first_line: str) -> str:
    """The words inside the bordered box whose first line is ``first_line``, on one line."""
    lines = text.splitlines()
    top = next(i for i, line in enumerate(lines) if first_line in line)
    left = lines[top].rindex("│", 0, lines[top].index(first_line))
    right = lines[top].index("│", left + 1)
    inside = []
    for line in lines[top:]:
        if line[left] != "│":  # the bottom border
            break
        inside.append(line[left + 1 : right])
    return " ".join(" ".join(inside).split())


def _starts_at(screen: LedgerScreen, seq: int) -> bool:
    return bool(screen.entries) and screen.entries[0].seq == seq


def _seqs(screen: LedgerScreen) -> list[int]:
    return [e.seq for e in screen.entries]


@synchronous
async def test_ledger_pages_back_to_the_first_entry_and_forward_again(study: OpenedStudy) -> None:
    _fill_ledger(study, ENTRIES)
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        await pilot.press("l")
        await wait_until(pilot, lambda: isinstance(app.screen, LedgerScreen))
        ledger = app.screen
        assert isinstance(ledger, LedgerScreen)
        await wait_until(pilot, lambda: bool(ledger.entries))
        assert _seqs(ledger) == list(range(ENTRIES, ENTRIES - PAGE, -1))  # newest first
        text = screen_text(app)
        assert "page 1 (newest) · 1,801–2,300" in text
        assert "< older" in text and "> newer" in text  # the keys are on screen
        title = text.splitlines()[0]
        assert "ledger.sqlite" in title  # a long path is cut at the front, the name stays

        seen: list[int] = []
        for page in range(1, 6):
            seen += _seqs(ledger)
            if page < 5:
                top = ledger.entries[-1].seq - 1
                await pilot.press("less_than_sign")
                await wait_until(pilot, functools.partial(_starts_at, ledger, top))
        assert sorted(seen) == list(range(1, ENTRIES + 1))  # every entry, each once
        assert _seqs(ledger) == list(range(300, 0, -1))
        assert "page 5 (4 back) · 1–300 · oldest" in screen_text(app)
        assert "? help" in screen_text(app)  # every key fits on the bar at 80 columns
        await pilot.press("less_than_sign")  # nothing older: stays
        await pilot.pause(0.2)
        assert _seqs(ledger)[-1] == 1

        await pilot.press("greater_than_sign")
        await wait_until(pilot, lambda: ledger.entries[0].seq == 800)
        assert "page 4 (3 back) · 301–800" in screen_text(app)
        await pilot.press("t")
        await wait_until(pilot, lambda: ledger.entries[0].seq == ENTRIES)
        assert "page 1 (newest)" in screen_text(app)


@synchronous
async def test_paging_keeps_the_reviewer_filter(study: OpenedStudy) -> None:
    _fill_ledger(study, ENTRIES)
    bo = [i + 1 for i in range(ENTRIES) if i % 3 == 0]  # 767 entries by "bo"
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        await pilot.press("l")
        await wait_until(pilot, lambda: isinstance(app.screen, LedgerScreen))
        ledger = app.screen
        assert isinstance(ledger, LedgerScreen)
        await wait_until(pilot, lambda: bool(ledger.entries))
        await pilot.press("less_than_sign")  # page back: a new filter starts at the newest
        await wait_until(pilot, lambda: ledger.entries[0].seq == ENTRIES - PAGE)
        await pilot.press("w", "b", "o", "enter")
        await wait_until(pilot, lambda: {e.reviewer for e in ledger.entries} == {"bo"})
        assert _seqs(ledger) == bo[::-1][:PAGE]
        await pilot.press("less_than_sign")
        await wait_until(pilot, lambda: ledger.entries[0].seq == bo[::-1][PAGE])
        assert _seqs(ledger) == bo[::-1][PAGE:]
        assert {e.reviewer for e in ledger.entries} == {"bo"}
        assert "· oldest" in screen_text(app)


@synchronous
async def test_quit_question_names_the_drafts_on_other_cases(study: OpenedStudy) -> None:
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        session = app.session
        assert session is not None and session.queue is not None
        here = str(study.snapshot.case_ids[app.screen.query_one(CaseList).current_row])
        others = [str(study.snapshot.case_ids[r]) for r in session.queue.order[1:6]]
        for i, case_id in enumerate(others):
            save_draft(study, case_id, f"draft {i}")
        await pilot.press("d")
        await wait_until(pilot, lambda: isinstance(app.screen, DecisionDialog))
        await wait_until(pilot, lambda: not app.screen._loading)  # type: ignore[attr-defined]
        await pilot.press("4", "1", *"waiting for a letter")
        await pilot.press("ctrl+q")
        await wait_until(pilot, lambda: isinstance(app.screen, ConfirmQuit))
        text = screen_text(app)
        box = _box(text, "Quit without recording?")
        assert f"The note on {here} is not recorded" in box
        newest_first = others[::-1]  # drafts are listed most recently saved first
        listed = ", ".join(newest_first[:3])
        assert f"Your 5 saved drafts on other cases ({listed} and 2 more) are kept" in box
        assert "nothing is lost" in box
        assert here not in box.split("Your 5")[1]  # the open case is not an "other" draft
        assert "y quit, keep the draft esc stay" in box  # the whole question fits in 80×24
        await pilot.press("escape")
        await wait_until(pilot, lambda: isinstance(app.screen, DecisionDialog))


def test_other_drafts_sentence_counts_and_names_a_few() -> None:
    from closecall.tui.confirm_quit import other_drafts_line

    assert other_drafts_line([]) == ""
    assert other_drafts_line(["A-1"]) == (
        "Your saved draft on another case (A-1) is kept as it is: nothing is lost."
    )
    assert other_drafts_line(["A-1", "A-2", "A-3"]).startswith(
        "Your 3 saved drafts on other cases (A-1, A-2, A-3) are kept"
    )
    assert "(A-1, A-2, A-3 and 1 more)" in other_drafts_line(["A-1", "A-2", "A-3", "A-4"])
