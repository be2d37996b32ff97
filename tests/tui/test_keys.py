"""One meaning per key across every review screen (issue 12, item 5).

The table is built from the code: every ``BINDINGS`` list of every class in ``closecall.tui``
and every key an ``on_key`` handler reacts to (read with ``ast``). A key may carry several
descriptions only where they say the same thing in the words of their screen (``SAME``);
anything else is a clash and fails with the whole table in the message.
"""

from __future__ import annotations

import ast
import importlib
import inspect
import pkgutil
from collections import defaultdict

import pytest
from textual.binding import Binding
from tui_helpers import open_queue, screen_text, synchronous, wait_until

import closecall.tui
from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp

#: Descriptions that are one meaning worded for their screen; every other description is its
#: own meaning. Reviewed by hand: a new synonym needs a reason.
SAME = {
    # escape: leave what you are in (screen, dialog, field, search), nothing is lost
    "back": "leave",
    "close, keep draft": "leave",
    "cancel, keep draft": "leave",
    "close search": "leave",
    "stay": "leave",
    # enter: take what the cursor is on (open it, or finish the dialog once recorded)
    "open": "take",
    "open case": "take",
    "full": "take",
    "back (once recorded)": "take",
    # movement
    "down": "down",
    "scroll down": "down",
    "up": "up",
    "scroll up": "up",
    # the ledger, from anywhere or for the case shown
    "ledger": "ledger",
    "its ledger": "ledger",
    # /: find a case by its id (jump in the list; filter the ledger)
    "find id": "find a case by id",
    "case": "find a case by id",
    # digits: choose the numbered option of the dialog shown
    "replace theirs": "numbered option",
    "add mine beside": "numbered option",
    "choose the numbered option": "numbered option",
}


def _tui_modules() -> list[object]:
    names = [m.name for m in pkgutil.iter_modules(closecall.tui.__path__)]
    return [importlib.import_module(f"closecall.tui.{n}") for n in sorted(names)]


def _on_key_keys(cls: type) -> list[tuple[str, str]]:
    """Keys an ``on_key`` handler of ``cls`` reacts to, with what it does."""
    handler = cls.__dict__.get("on_key")
    if handler is None:
        return []
    tree = ast.parse(inspect.getsource(handler).lstrip().replace("\n    ", "\n"))
    out: list[tuple[str, str]] = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Compare) and ast.unparse(node.left) == "event.key":
            for comp in node.comparators:
                for const in ast.walk(comp):
                    if isinstance(const, ast.Constant) and isinstance(const.value, str):
                        out.append((const.value, f"{cls.__name__}.on_key"))
        if isinstance(node, ast.Attribute) and node.attr == "isdigit":
            out += [(str(d), "choose the numbered option") for d in range(1, 10)]
    return out


def key_table() -> dict[str, list[tuple[str, str, str]]]:
    """key -> [(class, action, description)] over every screen and widget of the views."""
    table: dict[str, list[tuple[str, str, str]]] = defaultdict(list)
    seen: set[type] = set()
    for module in _tui_modules():
        for cls in vars(module).values():
            if not inspect.isclass(cls) or cls in seen:
                continue
            if not cls.__module__.startswith("closecall.tui"):
                continue
            seen.add(cls)
            for b in cls.__dict__.get("BINDINGS", []):
                if not isinstance(b, Binding):
                    continue
                for key in b.key.split(","):
                    table[key.strip()].append((cls.__name__, b.action, b.description))
            for key, what in _on_key_keys(cls):
                table[key].append((cls.__name__, "on_key", what))
    return dict(table)


def clashes(table: dict[str, list[tuple[str, str, str]]]) -> dict[str, set[str]]:
    """Keys whose descriptions carry more than one meaning."""
    out = {}
    for key, uses in table.items():
        meanings = {SAME.get(desc.lower(), desc.lower()) for _, _, desc in uses}
        if len(meanings) > 1:
            out[key] = meanings
    return out


def test_the_table_sees_every_screen_and_handler() -> None:
    """The table is not empty by accident: it holds the screens' known keys."""
    table = key_table()
    owners = {cls for uses in table.values() for cls, _, _ in uses}
    assert {"QueueScreen", "CaseScreen", "LedgerScreen", "HelpScreen", "ModelScreen"} <= owners
    assert {"DecisionDialog", "ConflictPrompt", "ChoiceList", "EntryScreen"} <= owners
    assert ("ChoiceList", "on_key", "choose the numbered option") in table["3"]


def test_no_key_has_two_meanings_across_screens() -> None:
    table = key_table()
    found = clashes(table)
    listing = "\n".join(
        f"{key:>20}: " + "; ".join(f"{c} {d!r}" for c, _, d in uses)
        for key, uses in sorted(table.items())
    )
    assert not found, f"keys with more than one meaning: {found}\n{listing}"


def test_a_clash_is_caught() -> None:
    """The check itself can fail: ``n`` as 'newer page' beside the case screen's 'next'."""
    table = key_table()
    table["n"] = [*table.get("n", []), ("LedgerScreen", "page('newer')", "newer")]
    assert "n" in clashes(table)


@pytest.mark.parametrize("key", ["n", "o", "c", "r", "q"])
def test_the_letters_the_issue_names_mean_one_thing(key: str) -> None:
    uses = key_table().get(key, [])
    assert len({SAME.get(d.lower(), d.lower()) for _, _, d in uses}) <= 1, uses


# --------------------------------------------------------------------------- pilot: help, feedback


def test_help_from_the_list_explains_its_columns_before_other_screens_keys() -> None:
    from closecall.tui.case_screen import CaseScreen
    from closecall.tui.help_screen import help_text
    from closecall.tui.queue_screen import QueueScreen

    args = (["pooled", "unaware"], ["equal-costs"], "pooled")
    on_list = help_text(*args, here=QueueScreen).plain
    assert on_list.index("The list's columns") < on_list.index("Keys on the other screens")
    assert "why first" in on_list and "who differs" in on_list
    on_case = help_text(*args, here=CaseScreen).plain  # elsewhere: after every screen's keys
    assert on_case.index("Keys on the other screens") < on_case.index("The list's columns")


@synchronous
async def test_help_opens_at_the_current_screens_keys(study: OpenedStudy) -> None:
    from closecall.tui.help_screen import HelpScreen
    from closecall.tui.ledger_screen import LedgerScreen

    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=(80, 24)) as pilot:
        await open_queue(pilot)
        await pilot.press("l")
        await wait_until(pilot, lambda: isinstance(app.screen, LedgerScreen))
        await pilot.press("question_mark")
        await wait_until(pilot, lambda: isinstance(app.screen, HelpScreen))
        lines = screen_text(app).splitlines()
        assert "Keys here: Ledger" in lines[1], lines[:4]
        assert any("<" in line and "older" in line for line in lines[2:10])
        await pilot.press("question_mark")  # ? again closes it: the ledger is back
        await wait_until(pilot, lambda: isinstance(app.screen, LedgerScreen))
        await pilot.press("escape")
        await open_queue(pilot)
        await pilot.press("question_mark")
        await wait_until(pilot, lambda: isinstance(app.screen, HelpScreen))
        assert "Keys here: Close-call list" in screen_text(app).splitlines()[1]


@synchronous
async def test_ledger_verify_and_filters_say_what_they_do(study: OpenedStudy) -> None:
    from closecall.tui.ledger_screen import LedgerScreen

    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=(80, 24)) as pilot:
        await open_queue(pilot)
        await pilot.press("l")
        await wait_until(pilot, lambda: isinstance(app.screen, LedgerScreen))
        ledger = app.screen
        assert isinstance(ledger, LedgerScreen)
        await wait_until(pilot, lambda: ledger.verified_once)
        await pilot.press("v")  # the chain line would read the same: the status says it ran
        await wait_until(pilot, lambda: "chain checked again at" in screen_text(app))
        assert "chain ✓ verified" in screen_text(app)
        await pilot.press("w")
        await wait_until(pilot, lambda: "type a reviewer's login" in screen_text(app))
        await pilot.press("escape", "slash")
        await wait_until(pilot, lambda: "type a case id" in screen_text(app))
