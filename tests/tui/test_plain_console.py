"""Plain consoles (issue 12, item 6): ASCII mode draws nothing above 127; NO_COLOR's cursor is
reverse video, as docs/tui.md promises.

Every screen is driven by its keys and its whole frame is read back as the terminal would
receive it (after Textual's line filters, where ASCII mode works).
"""

from __future__ import annotations

import io
import os
from pathlib import Path

import pytest
from rich.console import Console
from textual.app import App
from textual.pilot import Pilot
from tui_helpers import open_queue, screen_text, synchronous, wait_until

from closecall.core.text import ASCII_GLYPHS, sparkline, to_ascii
from closecall.review.decisions import record_review
from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp
from closecall.tui.ascii_mode import ascii_wanted

SIZES = [(80, 24), (120, 40)]


def _non_ascii(text: str) -> list[str]:
    return sorted({ch for ch in text if ord(ch) >= 128})


def test_every_glyph_maps_to_one_ascii_character() -> None:
    for glyph, stand_in in ASCII_GLYPHS.items():
        assert len(glyph) == 1 and ord(glyph) >= 128, glyph
        assert len(stand_in) == 1 and stand_in.isascii() and stand_in.isprintable(), glyph
    spark = sparkline([0, 1, 2, 3, 4, 5, 6, 7, 8], 8)
    assert to_ascii(spark) == " .,:-=+*#"  # still a rising ramp, one cell per count
    assert to_ascii("名") == "??"  # a wide character keeps its two cells


def test_ascii_mode_is_automatic_on_the_linux_console_only() -> None:
    assert ascii_wanted(None, {"TERM": "linux"})
    assert not ascii_wanted(None, {"TERM": "xterm-256color"})
    assert not ascii_wanted(None, {})
    assert ascii_wanted(True, {"TERM": "xterm"}) and not ascii_wanted(False, {"TERM": "linux"})


@synchronous
async def test_the_linux_console_gets_ascii_mode_by_itself(
    study: OpenedStudy, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("TERM", "linux")
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=(80, 24)) as pilot:
        await open_queue(pilot)
        assert app.plain_ascii and not _non_ascii(screen_text(app))


@pytest.mark.parametrize(
    ("flags", "wanted"), [(["--ascii"], True), (["--no-ascii"], False), ([], None)]
)
def test_review_passes_ascii_to_the_screens(  # type: ignore[no-untyped-def]
    cli, study_config: Path, monkeypatch: pytest.MonkeyPatch, flags: list[str], wanted: bool | None
) -> None:
    seen: list[bool | None] = []

    def fake_init(self: ReviewApp, *args: object, plain_ascii: bool | None = None, **kw: object):  # type: ignore[no-untyped-def]
        seen.append(plain_ascii)
        self._return_code = None  # nothing is run: only what the command asked for is checked

    monkeypatch.setattr(ReviewApp, "__init__", fake_init)
    monkeypatch.setattr(ReviewApp, "run", lambda self: None)
    res = cli("review", "--config", str(study_config), *flags)
    assert res.code == 0, res
    assert seen == [wanted]
    assert "--ascii" in cli("review", "--help").out


def _record_two(study: OpenedStudy) -> str:
    """Two entries with a long non-ASCII note, so the ledger and entry screens draw text."""
    case = str(study.snapshot.case_ids[0])
    note = "Zoë’s landlord confirmed — “repairs done” · see file ✓ " * 3
    record_review(study, case, "override-favourable", study.config.review.reasons[0], note)
    record_review(study, str(study.snapshot.case_ids[1]), "uphold", None, "")
    return case


async def _visit_every_screen(pilot: Pilot[None], frames: dict[str, str]) -> None:
    from closecall.tui.case_screen import CaseScreen
    from closecall.tui.decision_dialog import DecisionDialog
    from closecall.tui.help_screen import HelpScreen
    from closecall.tui.ledger_screen import EntryScreen, LedgerScreen
    from closecall.tui.model_screen import ModelScreen

    app = pilot.app
    await open_queue(pilot)
    frames["list"] = screen_text(app)
    await pilot.press("ctrl+p")
    await pilot.pause(0.3)
    frames["commands"] = screen_text(app)
    await pilot.press("escape")
    await pilot.press("enter")
    await wait_until(pilot, lambda: isinstance(app.screen, CaseScreen))
    await wait_until(pilot, lambda: app.screen.details is not None)  # type: ignore[attr-defined]
    frames["case"] = screen_text(app)
    for i in range(4):
        await pilot.press("pagedown")
        frames[f"case, page {i + 2}"] = screen_text(app)
    await pilot.press("d")
    await wait_until(pilot, lambda: isinstance(app.screen, DecisionDialog))
    await wait_until(pilot, lambda: not app.screen._loading)  # type: ignore[attr-defined]
    await pilot.press("2", "2", *"a note")
    frames["decision"] = screen_text(app)
    await pilot.press("escape")
    await wait_until(pilot, lambda: isinstance(app.screen, CaseScreen))
    await pilot.press("escape")
    await open_queue(pilot)
    await pilot.press("l")
    await wait_until(pilot, lambda: isinstance(app.screen, LedgerScreen))
    await wait_until(pilot, lambda: bool(app.screen.entries))  # type: ignore[attr-defined]
    await wait_until(pilot, lambda: "verified" in screen_text(app))
    frames["ledger"] = screen_text(app)
    await pilot.press("down", "enter")  # the older entry, with the long note
    await wait_until(pilot, lambda: isinstance(app.screen, EntryScreen))
    frames["entry"] = screen_text(app)
    await pilot.press("escape", "escape")
    await open_queue(pilot)
    await pilot.press("m")
    await wait_until(pilot, lambda: isinstance(app.screen, ModelScreen))
    await wait_until(pilot, lambda: app.screen.data is not None)  # type: ignore[attr-defined]
    frames["model"] = screen_text(app)
    await pilot.press("question_mark")
    await wait_until(pilot, lambda: isinstance(app.screen, HelpScreen))
    for i in range(12):  # the whole help page, a screen at a time
        frames[f"help, page {i + 1}"] = screen_text(app)
        for _ in range(app.size[1] - 3):
            await pilot.press("down")


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
@synchronous
async def test_ascii_mode_draws_no_character_above_127(
    study: OpenedStudy, size: tuple[int, int]
) -> None:
    _record_two(study)
    frames: dict[str, str] = {}
    app = ReviewApp(study=study, login="reviewer", plain_ascii=True)
    async with app.run_test(size=size) as pilot:
        await _visit_every_screen(pilot, frames)
    assert len(frames) >= 20
    if os.environ.get("CLOSECALL_DUMP_FRAMES"):  # to read the frames by eye
        Path(os.environ["CLOSECALL_DUMP_FRAMES"]).write_text(
            "\n".join(f"=== {k}\n{v}" for k, v in frames.items())
        )
    bad = {name: _non_ascii(text) for name, text in frames.items() if _non_ascii(text)}
    assert not bad, bad
    assert "enter" in frames["list"] and "Zoe's landlord" in frames["entry"]


@synchronous
async def test_without_ascii_mode_the_same_screens_use_glyphs(study: OpenedStudy) -> None:
    """The check above can fail: the same walk in normal mode draws non-ASCII glyphs."""
    _record_two(study)
    frames: dict[str, str] = {}
    app = ReviewApp(study=study, login="reviewer", plain_ascii=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await _visit_every_screen(pilot, frames)
    assert "▶" in frames["list"] and "●" in frames["case"] and "“" in frames["entry"]


# --------------------------------------------------------------------------- NO_COLOR


def _frame_with_styles(app: App[None]) -> list[str]:
    """The frame as the terminal receives it, lines with their SGR escape codes."""
    width, height = app.size
    console = Console(
        width=width,
        height=height,
        file=io.StringIO(),
        force_terminal=True,
        color_system="truecolor",
        record=True,
        legacy_windows=False,
    )
    update = app.screen._compositor.render_update(
        full=True, screen_stack=app._background_screens, simplify=True
    )
    console.print(update)
    return console.export_text(styles=True).splitlines()


def _reverse_cells(line: str) -> bool:
    """Whether a styled line turns reverse video on (SGR 7)."""
    import re

    return any("7" in m.split(";") for m in re.findall(r"\x1b\[([0-9;]*)m", line))


@synchronous
async def test_no_color_cursor_rows_are_reverse_video(
    study: OpenedStudy, monkeypatch: pytest.MonkeyPatch
) -> None:
    from closecall.tui.ledger_screen import LedgerScreen

    _record_two(study)
    monkeypatch.setenv("NO_COLOR", "1")
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=(80, 24)) as pilot:
        assert app.no_color
        await open_queue(pilot)
        lines = _frame_with_styles(app)
        plain = screen_text(app).splitlines()
        cursor = next(i for i, line in enumerate(plain) if line.startswith("▶"))
        assert _reverse_cells(lines[cursor]), lines[cursor]
        assert not _reverse_cells(lines[cursor + 1])  # only the cursor row
        await pilot.press("l")
        await wait_until(pilot, lambda: isinstance(app.screen, LedgerScreen))
        await wait_until(pilot, lambda: bool(app.screen.entries))  # type: ignore[attr-defined]
        lines = _frame_with_styles(app)
        plain = screen_text(app).splitlines()
        newest = next(i for i, line in enumerate(plain) if line.lstrip().startswith("2 "))
        assert _reverse_cells(lines[newest]), lines[newest]
        assert not _reverse_cells(lines[newest + 1])
