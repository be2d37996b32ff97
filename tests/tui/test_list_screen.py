"""The close-call list a supervisor reads: frames at 80×24 and 120×40, and its switches.

The frames are compared with the text stored in tests/tui/snapshots/list-*.txt (read them: they
are the screen as a terminal shows it). Beside the stored frames, each test checks by content
that nothing that matters is cut: every column's name whole in the header, every row's
distance, reason and state whole, every switch (with its key) on screen, the reviewer in the
title. The switches are checked against the engine's answer for the same request
(closecall.review.query.answer_queue), which the command line also prints.

After a deliberate change: ``CLOSECALL_UPDATE_SNAPSHOTS=1 pytest tests/tui/test_list_screen.py``
and read the diff of tests/tui/snapshots/.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

import numpy as np
import pytest
from textual.pilot import Pilot
from tui_helpers import open_queue, screen_text, synchronous, wait_until

from closecall.review.query import QueueQuery, answer_queue
from closecall.review.triage import CLOSENESS_WORDS, PROXIES_WORD, TIER_WORDS
from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp
from closecall.tui.case_list import CaseList
from closecall.tui.marks import STATE_WORD
from closecall.tui.queue_screen import QueueScreen

SNAPSHOTS = Path(__file__).parent / "snapshots"
SIZES = [(80, 24), (120, 40)]
SWITCHES = ("s order:", "g group:", "f flips:", "a ambiguous", "o rests on:", "u unreviewed",
            "c clear filters")  # fmt: skip


def _ids(size: tuple[int, int]) -> str:
    return f"{size[0]}x{size[1]}"


def _compare(name: str, text: str) -> None:
    path = SNAPSHOTS / f"{name}.txt"
    if os.environ.get("CLOSECALL_UPDATE_SNAPSHOTS"):
        SNAPSHOTS.mkdir(exist_ok=True)
        path.write_text(text)
    assert path.exists(), f"no stored frame {path}: run with CLOSECALL_UPDATE_SNAPSHOTS=1"
    assert text == path.read_text(), f"{name} differs from {path}"


async def _ready(pilot: Pilot[None]) -> QueueScreen:
    await open_queue(pilot)
    screen = pilot.app.screen
    assert isinstance(screen, QueueScreen)
    await wait_until(pilot, lambda: screen.session.measures_ready)
    await pilot.pause(0.2)
    return screen


async def _press(pilot: Pilot[None], screen: QueueScreen, key: str) -> None:
    """Press a switch key and wait for the list to be ranked again."""
    before = screen.session.queue
    await pilot.press(key)
    await wait_until(pilot, lambda: screen.session.queue is not before)
    await pilot.pause(0.2)


def _check_whole(text: str, size: tuple[int, int]) -> None:
    """Nothing that matters is cut (by content, beside the stored frame)."""
    lines = text.splitlines()
    assert "you: reviewer" in lines[0] and "snapshot" in lines[0]
    header = next(line for line in lines if " case " in line and "distance" in line)
    for column in ("#", "case", "heritage", "distance", "why first", "state"):
        assert re.search(rf"(^| ){re.escape(column)}( |$)", header), (column, header)
    assert "who differs" in header or "decided otherwise by" in header
    flat = " ".join(text.split())
    for switch in SWITCHES:
        assert switch in flat, switch
    assert "why first:" in flat
    rows = [line for line in lines if re.match(r"^[▶ ] +\d+ HR-", line)]
    assert len(rows) >= (12 if size[1] == 24 else 25)
    words = "|".join(map(re.escape, (*TIER_WORDS, PROXIES_WORD)))
    distances = "|".join(map(re.escape, CLOSENESS_WORDS))
    states = "|".join(map(re.escape, STATE_WORD.values()))
    for row in rows:
        assert re.search(rf" ({distances}) +({words}) ", row), row
        assert re.search(rf" ({states}) *[▁▂▃▄▅▆▇█]?\s*$", row), row
        assert "PUNSD" not in row and "*UN" not in row  # no letter masks
        assert "+0.00" not in row and "−0.00" not in row


@pytest.mark.parametrize("size", SIZES, ids=_ids)
@synchronous
async def test_list_frame(frozen_study: OpenedStudy, size: tuple[int, int]) -> None:
    app = ReviewApp(study=frozen_study, login="reviewer")
    async with app.run_test(size=size) as pilot:
        await _ready(pilot)
        text = screen_text(app)
        _compare(f"list-{_ids(size)}", text)
        _check_whole(text, size)
        # the first screen holds the cases that rest on the group, nearest the line first
        rows = [line for line in text.splitlines() if re.match(r"^[▶ ] +\d+ HR-", line)]
        assert all(" rests on group " in row for row in rows)


@pytest.mark.parametrize("size", SIZES, ids=_ids)
@synchronous
async def test_filtered_list_frame(frozen_study: OpenedStudy, size: tuple[int, int]) -> None:
    app = ReviewApp(study=frozen_study, login="reviewer")
    async with app.run_test(size=size) as pilot:
        screen = await _ready(pilot)
        for key in ("f", "f", "g"):  # model flips, first group
            await _press(pilot, screen, key)
        text = screen_text(app)
        _compare(f"list-model-flips-{_ids(size)}", text)
        _check_whole(text, size)
        flat = " ".join(text.split())
        assert "f flips: model" in flat and "g group: Aster" in flat


@synchronous
async def test_switches_give_the_engine_answer_and_counts(frozen_study: OpenedStudy) -> None:
    app = ReviewApp(study=frozen_study, login="reviewer")
    async with app.run_test(size=(100, 30)) as pilot:
        screen = await _ready(pilot)
        steps = [
            ("f", {"flips": "any"}),
            ("f", {"flips": "model"}),
            ("f", {"flips": "lens"}),
            ("f", {}),
            ("o", {"rests_on": "group"}),
            ("o", {"rests_on": "proxies"}),
            ("a", {"rests_on": "proxies", "ambiguous": True}),
            ("g", {"rests_on": "proxies", "ambiguous": True, "group": "Aster"}),
            ("c", {}),
            ("s", {"sort": "closeness"}),
        ]
        ids = frozen_study.snapshot.case_ids
        for key, request in steps:
            await _press(pilot, screen, key)
            want = answer_queue(frozen_study, QueueQuery(**request)).queue
            got = screen.session.queue
            assert got is not None
            assert list(ids[got.order]) == list(ids[want.order]), (key, request)
            counts = screen.session.counts()
            for name in ("listed", "within_band", "flips", "model_flips", "lens_flips"):
                assert counts[name] == want.counts[name], (key, name)
            head = " ".join(screen_text(app).split())
            assert f"{want.counts['listed']:,} listed of" in head
            assert f"{want.counts['within_band']:,} within ±" in head
            assert f"{want.counts['flips']:,} flips" in head


@synchronous
async def test_each_filter_narrows_and_the_cursor_goes_to_the_top(
    frozen_study: OpenedStudy,
) -> None:
    app = ReviewApp(study=frozen_study, login="reviewer")
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await _ready(pilot)
        cases = screen.query_one(CaseList)
        everything = len(screen.session.queue or [])
        for key in ("f", "f", "f", "f", "o", "o", "o", "a", "a", "u", "u", "g"):
            await pilot.press("j", "j", "j")
            await pilot.pause(0.1)
            assert cases.cursor == 3
            await _press(pilot, screen, key)
            assert cases.cursor == 0 and cases.scroll_offset.y == 0, key
            listed = len(screen.session.queue or [])
            s = screen.session.settings
            if s.flips or s.rests_on or s.ambiguous or s.group:
                assert 0 < listed < everything, (key, s)


@synchronous
async def test_counts_follow_a_group_filter_not_the_study(frozen_study: OpenedStudy) -> None:
    """Before, the header counted the whole study's within-band cases and flips."""
    app = ReviewApp(study=frozen_study, login="reviewer")
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await _ready(pilot)
        await _press(pilot, screen, "g")
        q = screen.session.queue
        assert q is not None
        margin = q.margin[q.order]
        flips = q.grid.flip[q.order]
        counts = screen.session.counts()
        assert counts["within_band"] == int(np.count_nonzero(np.abs(margin) <= q.band))
        assert counts["flips"] == int(np.count_nonzero(flips))
        whole = answer_queue(frozen_study).queue.counts
        assert counts["within_band"] < whole["within_band"] and counts["flips"] < whole["flips"]
