"""What the case, ledger, entry, model and help screens show at 80×24 and 120×40, as text.

Each frame is compared with the text stored in tests/tui/snapshots/ (read them: they are the
screens as a terminal shows them). Times, hashes and the temporary path are masked cell for
cell, so the widths stay what the screen drew. Beside the stored frames, each test checks by
content that nothing that matters is cut: every model's whole name on the case axis, the
proxy tag beside a long feature name, the whole note of a ledger entry, every column of the
model's weights, the current screen's keys first in help.

After a deliberate change: ``CLOSECALL_UPDATE_SNAPSHOTS=1 pytest tests/tui/test_screen_text.py``
and read the diff of tests/tui/snapshots/.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

import pytest
from textual.pilot import Pilot
from tui_helpers import open_queue, screen_text, synchronous, wait_until

import closecall.review.ledger.access as access
from closecall.core.vocabulary import short_model
from closecall.review.decisions import record_review
from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp
from closecall.tui.case_sections import fit_label

SNAPSHOTS = Path(__file__).parent / "snapshots"
SIZES = [(80, 24), (120, 40)]
NOTE = (
    "Called the applicant on 3 December: the landlord's letter confirming the repairs arrived "
    "after the scoring run, so the model could not see it. Income verified against the 2025 "
    "statement. Override recommended; second reader please check the zone assignment, which "
    "looks stale. END-OF-NOTE"
)


def _masked(text: str) -> str:
    """Times, hashes and the temporary path replaced cell for cell."""
    text = re.sub(r"\d{4}-\d\d-\d\d \d\d:\d\d:\d\d", "YYYY-MM-DD hh:mm:ss", text)
    text = re.sub(r"\b\d\d-\d\d \d\d:\d\d\b", "MM-DD hh:mm", text)
    text = re.sub(r"\b[0-9a-f]{12,64}\b", lambda m: "h" * len(m.group()), text)
    return re.sub(r"(Ledger ─ ).*?(ledger\.sqlite)", r"\1<path>/\2", text)


def _compare(name: str, text: str) -> None:
    path = SNAPSHOTS / f"{name}.txt"
    text = _masked(text)
    if os.environ.get("CLOSECALL_UPDATE_SNAPSHOTS"):
        SNAPSHOTS.mkdir(exist_ok=True)
        path.write_text(text)
    assert path.exists(), f"no stored frame {path}: run with CLOSECALL_UPDATE_SNAPSHOTS=1"
    assert text == path.read_text(), f"{name} differs from {path}"


def _ids(size: tuple[int, int]) -> str:
    return f"{size[0]}x{size[1]}"


def _record(study: OpenedStudy, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(access, "current_login", lambda: "alice")
    ids = study.snapshot.case_ids
    reasons = study.config.review.reasons
    record_review(study, str(ids[5]), "override-favourable", reasons[0], NOTE)
    record_review(study, str(ids[7]), "uphold", None, "")


async def _case(pilot: Pilot[None]) -> None:
    from closecall.tui.case_screen import CaseScreen

    await open_queue(pilot)
    await pilot.press("enter")
    await wait_until(pilot, lambda: isinstance(pilot.app.screen, CaseScreen))
    await wait_until(pilot, lambda: pilot.app.screen.details is not None)  # type: ignore[attr-defined]


@pytest.mark.parametrize("size", SIZES, ids=_ids)
@synchronous
async def test_case_screen_text(frozen_study: OpenedStudy, size: tuple[int, int]) -> None:
    app = ReviewApp(study=frozen_study, login="reviewer")
    async with app.run_test(size=size) as pilot:
        await _case(pilot)
        text = screen_text(app)
        _compare(f"case-{_ids(size)}", text)
        for model in frozen_study.snapshot.model_names:  # every name whole on the axis
            assert re.search(rf"[ *]{re.escape(short_model(model))} ", text), model
        assert "claimed by you" in text.splitlines()[0]


def test_a_long_feature_name_keeps_its_proxy_tag() -> None:
    """Cutting the label cut the tag before (label[:22]); the name gives way now."""
    label = fit_label("distance_to_nearest_depot_km", " (proxy)", 22)
    assert label.endswith(" (proxy)") and len(label) == 22
    assert fit_label("zone", " (proxy)", 22) == "zone (proxy)"


@pytest.mark.parametrize("size", SIZES, ids=_ids)
@synchronous
async def test_ledger_screen_text(
    study: OpenedStudy, monkeypatch: pytest.MonkeyPatch, size: tuple[int, int]
) -> None:
    from closecall.tui.ledger_screen import EntryScreen, LedgerScreen

    _record(study, monkeypatch)
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=size) as pilot:
        await open_queue(pilot)
        await pilot.press("l")
        await wait_until(pilot, lambda: isinstance(app.screen, LedgerScreen))
        await wait_until(pilot, lambda: len(app.screen.entries) == 2)  # type: ignore[attr-defined]
        await wait_until(pilot, lambda: "verified" in screen_text(app))
        await pilot.press("down")  # the override, with the long note
        await pilot.pause(0.2)
        text = screen_text(app)
        _compare(f"ledger-{_ids(size)}", text)
        header = next(line for line in text.splitlines() if " seq " in f" {line}")
        assert header.rstrip().endswith("note"), header  # the last column's name is whole
        await pilot.press("enter")
        await wait_until(pilot, lambda: isinstance(app.screen, EntryScreen))
        text = screen_text(app)
        _compare(f"entry-{_ids(size)}", text)
        flat = " ".join(" ".join(text.split()).split(" "))
        assert " ".join(NOTE.split()) in flat  # the whole note, wrapped, nothing cut


@pytest.mark.parametrize("size", SIZES, ids=_ids)
@synchronous
async def test_model_screen_text(frozen_study: OpenedStudy, size: tuple[int, int]) -> None:
    from closecall.tui.model_screen import ModelScreen

    app = ReviewApp(study=frozen_study, login="reviewer")
    async with app.run_test(size=size) as pilot:
        await open_queue(pilot)
        await pilot.press("m")
        await wait_until(pilot, lambda: isinstance(app.screen, ModelScreen))
        await wait_until(pilot, lambda: app.screen.data is not None)  # type: ignore[attr-defined]
        text = screen_text(app)
        _compare(f"model-{_ids(size)}", text)
        rows = [line for line in text.splitlines() if re.search(r"\d–\d|—–—", line)]
        assert rows, text
        for line in rows:  # each weight row ends with the whole interval (then the scroll bar)
            body = line[: size[0] - 2]
            assert re.search(r"\d–[\d.e+-]*\d\s*$", body.rstrip()), line
            assert "…" not in body


@pytest.mark.parametrize("size", SIZES, ids=_ids)
@synchronous
async def test_help_screen_text(frozen_study: OpenedStudy, size: tuple[int, int]) -> None:
    from closecall.tui.help_screen import HelpScreen

    app = ReviewApp(study=frozen_study, login="reviewer")
    async with app.run_test(size=size) as pilot:
        await _case(pilot)
        await pilot.press("question_mark")
        await wait_until(pilot, lambda: isinstance(app.screen, HelpScreen))
        text = screen_text(app)
        _compare(f"help-{_ids(size)}", text)
        lines = text.splitlines()
        assert lines[1].strip() == "Keys here: Case"
        assert any(line.split()[:2] == ["n", "next"] for line in lines[2:12] if line.split())
