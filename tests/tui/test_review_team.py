"""The review screen in a team: a login that may not record gets a message, never a crash."""

from __future__ import annotations

import dataclasses

from tui_helpers import open_queue, screen_text, synchronous, wait_until

from closecall.review.decisions import ledger_entries
from closecall.review.ledger import current_login
from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp
from closecall.tui.decision_dialog import DecisionDialog

SIZE = (120, 40)


def _as_analyst(study: OpenedStudy) -> OpenedStudy:
    review = dataclasses.replace(
        study.config.review, reviewers=("someone-else",), analysts=(current_login(),)
    )
    return OpenedStudy(dataclasses.replace(study.config, review=review), study.snapshot)


@synchronous
async def test_an_analyst_pressing_d_gets_a_message(study: OpenedStudy) -> None:
    analyst = _as_analyst(study)
    app = ReviewApp(study=analyst, login="analyst")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        await pilot.press("d")
        await wait_until(pilot, lambda: "may not record" in screen_text(app))
        assert not isinstance(app.screen, DecisionDialog)
        await pilot.press("enter")  # the case screen: d there too
        await pilot.pause(0.3)
        await pilot.press("d")
        await wait_until(pilot, lambda: "may not record" in screen_text(app))
        assert app.is_running
    assert ledger_entries(analyst.config) == []
