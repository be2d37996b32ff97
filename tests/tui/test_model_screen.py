"""The model screen (m on the case list) shows the weights `closecall model` computes."""

from __future__ import annotations

from tui_helpers import open_queue, screen_text, synchronous, wait_until

from closecall.analysis.weights import model_weights
from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp
from closecall.tui.model_screen import ModelScreen, weights_text
from closecall.tui.queue_screen import QueueScreen


@synchronous
async def test_m_opens_the_weights_and_esc_goes_back(study: OpenedStudy) -> None:
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=(80, 24)) as pilot:
        await open_queue(pilot)
        await pilot.press("m")
        await wait_until(pilot, lambda: isinstance(app.screen, ModelScreen))
        screen = app.screen
        await wait_until(pilot, lambda: screen.data is not None)  # type: ignore[attr-defined]
        text = screen_text(app)
        assert "pooled" in text and "(intercept)" in text and "threshold, lens" in text
        data = model_weights(study.snapshot)
        first = data["models"][0]["rows"][1]
        assert first["term"][:10] in text
        lines = weights_text(data).plain.splitlines()
        assert all(len(line) <= 78 for line in lines)  # nothing cut at 80 columns
        group_rows = [r for m in data["models"] for r in m["rows"] if r["group"]]
        assert group_rows and sum("[group]" in line for line in lines) == len(group_rows)
        await pilot.press("escape")
        await wait_until(pilot, lambda: isinstance(app.screen, QueueScreen))
