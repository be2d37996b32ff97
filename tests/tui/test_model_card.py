"""The model screen shows the deployed scorecard whole (issue 15): every feature's levels or
ranges with their points, the base points, the cut-off and the points that double the odds.

The reference is the card file itself, read here with Python's csv module (docs/scorecard.md's
format: settings rows in brackets, numeric bins [low, high), one row per level): every row
appears on the screen, in the file's order, with its points. The frame at 80×24 (the card's
end, scrolled to) is stored in tests/tui/snapshots/model-card-80x24.txt; after a deliberate
change: ``CLOSECALL_UPDATE_SNAPSHOTS=1 pytest tests/tui/test_model_card.py``.
"""

from __future__ import annotations

import csv
import os
from pathlib import Path

from textual.containers import VerticalScroll
from tui_helpers import open_queue, screen_text, synchronous, wait_until

from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp
from closecall.tui.model_screen import ModelScreen, weights_text

FRAME = Path(__file__).parent / "snapshots" / "model-card-80x24.txt"


def _card_file(study: OpenedStudy) -> tuple[dict[str, float], list[dict[str, str]]]:
    path = Path(str(study.config.deployed.scorecard))
    with path.open(newline="") as f:
        rows = list(csv.DictReader(f))
    settings = {r["feature"]: float(r["points"]) for r in rows if r["feature"].startswith("(")}
    return settings, [r for r in rows if not r["feature"].startswith("(")]


def _points(text: str) -> float:
    return float(text.replace("−", "-").replace("+", ""))


def _in_words(row: dict[str, str]) -> str:
    if row["level"]:
        return row["level"]
    low, high = row["low"], row["high"]
    if not low:
        return f"below {float(high):g}"
    if not high:
        return f"{float(low):g} or more"
    return f"{float(low):g} to under {float(high):g}"


@synchronous
async def test_the_whole_card_is_on_the_model_screen(frozen_study: OpenedStudy) -> None:
    settings, rows = _card_file(frozen_study)
    app = ReviewApp(study=frozen_study, login="reviewer")
    async with app.run_test(size=(80, 24)) as pilot:
        await open_queue(pilot)
        await pilot.press("m")
        await wait_until(pilot, lambda: isinstance(app.screen, ModelScreen))
        screen = app.screen
        assert isinstance(screen, ModelScreen)
        await wait_until(pilot, lambda: screen.data is not None)
        screen.query_one("#model-body", VerticalScroll).scroll_end(animate=False)
        await pilot.pause(0.3)
        frame = screen_text(app)
        data = screen.data
    assert data is not None
    lines = weights_text(data).plain.splitlines()
    assert all(len(line) <= 78 for line in lines)  # nothing cut at 80 columns
    start = next(i for i, line in enumerate(lines) if "level or range" in line)
    shown = [line for line in lines[start + 1 :] if line.strip()]
    assert len(shown) == len(rows)
    feature = ""
    for line, row in zip(shown, rows, strict=True):
        name, level, points = line[2:28].strip(), line[29:51].strip(), line[51:].strip()
        if name:
            feature = name.split(" [")[0]
        assert feature == row["feature"], (line, row)
        assert level == _in_words(row), (line, row)
        assert _points(points) == float(row["points"]), (line, row)
    head = " ".join(lines[start - 3 : start])
    assert f"base {settings['(intercept)']:g} points" in head
    assert f"cut-off {settings['(cutoff)']:g}: favourable at or above it" in head
    assert f"{settings['(pdo)']:g} points double the odds" in head
    group = [line for line in shown if "[group]" in line]
    assert len(group) == 1 and frozen_study.config.data.group[0] in group[0]
    if os.environ.get("CLOSECALL_UPDATE_SNAPSHOTS"):
        FRAME.write_text(frame)
    assert frame == FRAME.read_text()
