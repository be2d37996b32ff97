"""Frames of the list, case and decision screens at 80×24 and 120×40 (SVG snapshots).

Deterministic: the bundled demo data (fixed seed), a fixed snapshot id and a fixed name for
"you"; no clock appears in these frames. Update after a deliberate change with
``pytest tests/tui/test_snapshots.py --snapshot-update`` and look at the SVGs.
"""

from __future__ import annotations

import pytest
from textual.pilot import Pilot
from tui_helpers import open_queue, wait_until

from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp
from closecall.tui.case_screen import CaseScreen
from closecall.tui.decision_dialog import DecisionDialog

SIZES = [(80, 24), (120, 40)]


def _app(study: OpenedStudy) -> ReviewApp:
    return ReviewApp(study=study, login="reviewer")


async def _case(pilot: Pilot[None]) -> None:
    await open_queue(pilot)
    await pilot.press("j", "enter")
    await wait_until(pilot, lambda: isinstance(pilot.app.screen, CaseScreen))
    await wait_until(pilot, lambda: pilot.app.screen.details is not None)  # type: ignore[attr-defined]


async def _dialog(pilot: Pilot[None]) -> None:
    await _case(pilot)
    await pilot.press("d")
    await wait_until(pilot, lambda: isinstance(pilot.app.screen, DecisionDialog))
    await wait_until(pilot, lambda: not pilot.app.screen._loading)  # type: ignore[attr-defined]
    await pilot.press("2", "3")  # override → favourable, a reason: focus lands on the note


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_queue_frame(snap_compare, frozen_study: OpenedStudy, size: tuple[int, int]) -> None:  # type: ignore[no-untyped-def]
    assert snap_compare(_app(frozen_study), terminal_size=size, run_before=open_queue)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_case_frame(snap_compare, frozen_study: OpenedStudy, size: tuple[int, int]) -> None:  # type: ignore[no-untyped-def]
    assert snap_compare(_app(frozen_study), terminal_size=size, run_before=_case)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_dialog_frame(snap_compare, frozen_study: OpenedStudy, size: tuple[int, int]) -> None:  # type: ignore[no-untyped-def]
    assert snap_compare(_app(frozen_study), terminal_size=size, run_before=_dialog)
