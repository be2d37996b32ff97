"""The list header and the case axis as words a supervisor reads (issue 12 items 4 and 6).

In ASCII mode ``±`` is written ``+/-`` (the glyph table's one-cell ``~`` is also the ambiguous
mark ``≈``), with room made for it; the header's counts are never cut at 80 columns, a drafts
count included: they break between parts instead.
"""

from __future__ import annotations

import re

from tui_helpers import open_queue, screen_text, synchronous, wait_until

from closecall.review.decisions import save_draft
from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp
from closecall.tui.case_screen import CaseScreen

SIZE = (80, 24)


async def _case_frame(app: ReviewApp) -> tuple[str, str]:
    """(list frame, case frame) of the first listed case."""
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        await pilot.pause(0.2)
        listed = screen_text(app)
        await pilot.press("enter")
        await wait_until(pilot, lambda: isinstance(app.screen, CaseScreen))
        await wait_until(pilot, lambda: app.screen.details is not None)  # type: ignore[attr-defined]
        await pilot.pause(0.2)
        return listed, screen_text(app)


def _axis_rows(case: str, study: OpenedStudy) -> list[str]:
    names = ("pooled", "unaware", "proxy-free", "split", "deployed")
    return [line for line in case.splitlines() if line[2:].split(" ")[0] in names]


@synchronous
async def test_ascii_mode_writes_plus_minus_with_room_for_it(study: OpenedStudy) -> None:
    listed, case = await _case_frame(ReviewApp(study=study, login="reviewer", plain_ascii=True))
    assert "within +/-0.5 " in listed and "~0.5" not in listed
    rows = _axis_rows(case, study)
    assert len(rows) == len(study.snapshot.model_names)
    for row in rows:
        assert len(row.rstrip()) <= SIZE[0]
        # margin, band (or "-" for imported scores) and a decision per lens, whole
        assert re.search(r" [+-]?\d\.\d\d +(\+/-\d\.\d\d|-) +[+-] [+-]\s*\S?\s*$", row), row
    assert "~0." not in case  # "~" is left to the ambiguous mark
    header = next(line for line in case.splitlines() if "margin" in line and "band" in line)
    assert header.index("band") + 4 == rows[0].index("+/-") + 7  # the column's right edge


@synchronous
async def test_normal_mode_keeps_the_plus_minus_sign(study: OpenedStudy) -> None:
    listed, case = await _case_frame(ReviewApp(study=study, login="reviewer"))
    assert "within ±0.5 " in listed
    assert all(re.search(r" ±\d\.\d\d ", row) or " — " in row for row in _axis_rows(case, study))


@synchronous
async def test_the_counts_break_between_parts_instead_of_being_cut(study: OpenedStudy) -> None:
    for i, case_id in enumerate(study.snapshot.case_ids[:2]):
        save_draft(study, str(case_id), f"draft {i}")
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=SIZE) as pilot:
        await open_queue(pilot)
        await wait_until(pilot, lambda: "2 drafts" in screen_text(app))
        lines = screen_text(app).splitlines()
    assert "listed of 912 │ " in lines[1] and "within ±0.5 · " in lines[1]
    assert lines[2].strip() == "0 reviewed · 0 claimed · 2 drafts"
    assert not any("…" in line for line in lines[:3][1:])
