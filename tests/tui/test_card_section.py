"""The case screen shows the deployed scorecard's own reasons (issue 15).

The figures are checked against the explain data they are drawn from, which
tests/test_scorecard_explain.py checks against the PDO formula and a pandas recomputation.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from textual.widgets import Static
from tui_helpers import open_queue, synchronous, wait_until

from closecall.analysis.explain import explain_case
from closecall.setup.demo import write_demo
from closecall.suite.opening import OpenedStudy, open_study
from closecall.tui.app import ReviewApp
from closecall.tui.card_section import card_reasons
from scorecard_helpers import card_study, without_card


@pytest.fixture(scope="module")
def card_opened(tmp_path_factory: pytest.TempPathFactory) -> OpenedStudy:
    return open_study(card_study(Path(tmp_path_factory.mktemp("tui-card")), cases=800))


def test_card_reasons_text(card_opened: OpenedStudy) -> None:
    snap = card_opened.snapshot
    briar = [str(i) for i, g in zip(snap.case_ids, snap.group_labels, strict=True) if g == "Briar"]
    d = explain_case(card_opened, briar[0])
    c = d["deployed_card"]
    text = card_reasons(d).plain
    assert f"{c['points']:.4g} points, cut-off 500" in text
    assert "heritage (group)" in text  # the planted weight is among the largest
    assert "as Aster:" in text
    assert card_reasons({"deployed_card": None}).plain == ""


@synchronous
async def test_case_screen_shows_the_card(card_opened: OpenedStudy) -> None:
    from closecall.tui.case_screen import CaseScreen

    app = ReviewApp(study=card_opened, login="reviewer")
    async with app.run_test(size=(120, 40)) as pilot:
        await open_queue(pilot)
        await pilot.press("enter")
        await wait_until(pilot, lambda: isinstance(pilot.app.screen, CaseScreen))
        screen = pilot.app.screen
        await wait_until(pilot, lambda: screen.details is not None)  # type: ignore[attr-defined]
        shown = str(screen.query_one("#card", Static).render())
        case = screen.case_id  # type: ignore[attr-defined]
        c = explain_case(card_opened, case)["deployed_card"]
        assert f"{c['points']:.4g} points" in shown
        assert "scorecard.csv" in shown


@synchronous
async def test_no_card_section_without_a_card(tmp_path: Path) -> None:
    from closecall.tui.case_screen import CaseScreen

    opened = open_study(without_card(write_demo(tmp_path, cases=600, seed=2)))
    app = ReviewApp(study=opened, login="reviewer")
    async with app.run_test(size=(120, 40)) as pilot:
        await open_queue(pilot)
        await pilot.press("enter")
        await wait_until(pilot, lambda: isinstance(pilot.app.screen, CaseScreen))
        assert not pilot.app.screen.query("#card")
