"""The list's "N claimed" follows this screen's own releases at once (issue 12 item 2).

Before, leaving a case released its claim in the ledger but the list kept counting it (and
showing "◆ you" on its row) until the next read of the ledger, up to 15 seconds later. Others'
claims are still read every 15 seconds (docs/tui.md); a claim another review screen of the same
login holds is theirs, and stays counted.
"""

from __future__ import annotations

import re

from tui_helpers import open_queue, screen_text, synchronous, wait_until

from closecall.review.decisions import claim_case
from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp
from closecall.tui.case_screen import CaseScreen
from closecall.tui.queue_screen import QueueScreen

SIZE = (80, 24)


def _claimed(text: str) -> int:
    found = re.search(r"([\d,]+) claimed", text)
    assert found, text
    return int(found.group(1).replace(",", ""))


@synchronous
async def test_leaving_a_case_stops_counting_its_claim_at_once(study: OpenedStudy) -> None:
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        queue = app.screen
        assert isinstance(queue, QueueScreen)
        session = queue.session
        await pilot.press("enter")
        await wait_until(pilot, lambda: isinstance(app.screen, CaseScreen))
        case_id = app.screen.case_id  # type: ignore[attr-defined]
        await wait_until(pilot, lambda: session.claimed_by_me(case_id))
        assert session.counts()["claimed"] == 1  # the case is the list's first
        await pilot.press("escape")
        await wait_until(pilot, lambda: app.screen is queue)
        await pilot.pause(0.3)  # far less than the 15-second read of the ledger
        assert not session.claimed_by_me(case_id)
        assert session.counts()["claimed"] == 0
        assert _claimed(screen_text(app)) == 0


@synchronous
async def test_another_screens_claim_of_the_same_login_stays(study: OpenedStudy) -> None:
    other_case = str(study.snapshot.case_ids[0])
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        queue = app.screen
        assert isinstance(queue, QueueScreen)
        session = queue.session
        claim_case(study, other_case, "another-review-screen")  # a second `closecall review`
        await pilot.press("r")
        await wait_until(pilot, lambda: other_case in session.claims)
        await pilot.press("enter")
        await wait_until(pilot, lambda: isinstance(app.screen, CaseScreen))
        case_id = app.screen.case_id  # type: ignore[attr-defined]
        assert case_id != other_case
        await wait_until(pilot, lambda: session.claimed_by_me(case_id))
        await pilot.press("escape")
        await wait_until(pilot, lambda: app.screen is queue)
        await pilot.pause(0.3)
        assert other_case in session.claims and case_id not in session.claims
        assert session.counts()["claimed"] == (1 if other_case in set(
            session.snap.case_ids[session.queue.order]) else 0)  # type: ignore[union-attr]  # fmt: skip
        # a read of the ledger keeps the other screen's claim and not the released one
        await pilot.press("r")
        await pilot.pause(0.5)
        await wait_until(pilot, lambda: other_case in session.claims)
        assert case_id not in session.claims
