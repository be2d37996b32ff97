"""Help: every screen's keys, what each quantity and mark means in plain words, the cautions."""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import VerticalScroll
from textual.screen import Screen
from textual.widgets import Static

from closecall.core.cautions import CAUTIONS
from closecall.review.triage import CLOSENESS_WORDS, PROXIES_WORD, TIER_REASONS, TIER_WORDS
from closecall.tui.key_bar import KeyBar, key_label, one_key
from closecall.tui.marks import (
    ACTION_SHORT,
    AMBIGUOUS,
    CLAIM_MINE,
    CLAIM_OTHER,
    CURSOR,
    STATE_WORD,
)

MEANINGS = [
    (
        "margin",
        "How far the model's score is from the threshold, in log-odds. Above 0 "
        "(+) the model gives the favourable decision, below 0 (−) the unfavourable one. "
        "The list shows the reference model under the first cost lens.",
    ),
    (
        "close call",
        "A case within the review band either side of the threshold, or one that "
        "another model or cost lens decides differently.",
    ),
    (
        "flip",
        "A case that some model of the suite or some cost lens decides differently "
        "from the reference model.",
    ),
    (
        "cost lens",
        "A pair of error costs. It sets the threshold: a lens that counts a wrong "
        "favourable decision as dearer moves the threshold up.",
    ),
    (
        "band",
        "How far the margin could move across models that fit the history almost as "
        "well (the equally good models). A band that crosses the threshold makes the case "
        "ambiguous: an equally good model would decide it the other way.",
    ),
    (
        "dependence (dep)",
        "The share of the case's pull, away from an average case, that "
        "comes from the group attribute and the features that stand in for it (proxies).",
    ),
    (
        "group part / proxy part",
        "How many log-odds of the margin come from the group "
        "attribute itself / from its proxies. 'Rests on' means removing that part would flip "
        "the decision.",
    ),
    (
        "counterpart",
        "The same case carried into another group: the group swapped, and its "
        "proxies moved to where the case would stand in that group. If the decision changes, "
        "the group or its proxies decide it.",
    ),
    (
        "similar cases",
        "Past cases closest to this one on the non-group features, with what "
        "happened to them: treat like cases alike.",
    ),
    (
        "ledger",
        "The append-only record of decisions. Each entry carries the hash of the one "
        "before it, so an edited, removed or reordered entry breaks the chain.",
    ),
]


def _keys_of(title: str, bindings: list[BindingType], plain: bool = False) -> Text:
    """One line per binding, each key written once (the first binding of a key wins)."""
    text = Text()
    if title:
        text.append(f"{title}\n", "bold")
    seen: set[str] = set()
    for b in bindings:
        if not isinstance(b, Binding) or not b.description:
            continue
        keys = [k.strip() for k in b.key.split(",") if k.strip() not in seen]
        if not keys:
            continue
        seen.update(keys)
        spelled = "/".join(one_key(k, plain) for k in keys)
        label = key_label(b, plain) if b.key_display else spelled
        text.append(f"  {label:<12}")
        text.append(f" {b.description}\n")
    return text


def screen_keys() -> list[tuple[type, str, list[BindingType]]]:
    """Every screen with keys: its class, its name in the help, its bindings (in help order)."""
    from closecall.tui.case_list import CaseList
    from closecall.tui.case_screen import CaseScreen
    from closecall.tui.decision_dialog import DecisionDialog
    from closecall.tui.ledger_screen import EntryScreen, LedgerScreen
    from closecall.tui.model_screen import ModelScreen
    from closecall.tui.queue_screen import QueueScreen
    from closecall.tui.whatif_screen import WhatIfScreen

    return [
        (QueueScreen, "Close-call list", [*QueueScreen.BINDINGS, *CaseList.BINDINGS]),
        (CaseScreen, "Case", list(CaseScreen.BINDINGS)),
        (DecisionDialog, "Decision", list(DecisionDialog.BINDINGS)),
        (LedgerScreen, "Ledger", list(LedgerScreen.BINDINGS)),
        (EntryScreen, "Ledger entry", list(EntryScreen.BINDINGS)),
        (ModelScreen, "Model", list(ModelScreen.BINDINGS)),
        (WhatIfScreen, "What-if", list(WhatIfScreen.BINDINGS)),
    ]


def list_columns(lens_names: list[str], reference: str) -> Text:
    """What each column, mark and line of the close-call list means."""
    text = Text()
    text.append("The list's columns\n", "bold underline")
    text.append(f"  {CURSOR}  the case under the cursor; # its place in the list\n")
    text.append("  case, then the group level under the attribute's name\n")
    text.append(
        f"  distance: the reference model ({reference} under {lens_names[0]}) from its "
        "threshold, in words: " + ", ".join(CLOSENESS_WORDS) + "\n"
    )
    text.append("  why first: why the case is near the top, in this order:\n")
    for word, why in zip(TIER_WORDS, TIER_REASONS, strict=True):
        text.append(f"    {word:<15} {why}\n")
    text.append(f"    {PROXIES_WORD:<15} as 'rests on group', for the group's proxies\n")
    text.append(
        "  who differs (wider: decided otherwise by): the models and cost lenses that decide "
        "differently, by name (+N more when they do not fit)\n"
    )
    text.append("  state: " + ", ".join(STATE_WORD.values()))
    text.append(" ('open' = no decision yet);")
    text.append(f" {CLAIM_OTHER} name = claimed: someone is reading it now")
    text.append(f", {CLAIM_MINE} you = claimed by you (a claim never blocks)\n")
    text.append("  wider terminals add: margin in log-odds; band, a small axis around the\n")
    text.append("    threshold: ┼ threshold, ━ band, ● margin, ┿ the band crosses the threshold,\n")
    text.append(f"    {AMBIGUOUS} after it = ambiguous; dep (dependence share); the other\n")
    text.append("    models' margins\n")
    text.append("  chart: each group's cases near the threshold (│), [ ] the review band;\n")
    text.append("    each line is scaled to its own tallest bar\n")
    text.append("  switches: ● on, ○ off\n")
    text.append("  actions in the ledger: " + ", ".join(ACTION_SHORT.values()) + "\n\n")
    return text


def help_text(
    model_names: list[str],
    lens_names: list[str],
    reference: str,
    here: type | None = None,
    plain: bool = False,
) -> Text:
    """The help page as one text (also used by docs and tests).

    ``here`` is the screen help was opened from: its keys come first, under "Keys here"
    (from the list, followed by what its columns mean). ``plain`` writes keys in words (ASCII
    mode).
    """
    from closecall.tui.queue_screen import QueueScreen

    sections = screen_keys()
    current = [s for s in sections if here is not None and issubclass(here, s[0])]
    on_list = bool(current) and current[0][0] is QueueScreen
    text = Text()
    for _, name, bindings in current:
        text.append(f"Keys here: {name}\n", "bold underline")
        text.append(_keys_of("", bindings, plain))
        text.append("\n")
    if on_list:
        text.append(list_columns(lens_names, reference))
    text.append("Keys\n" if not current else "Keys on the other screens\n", "bold underline")
    for cls, name, bindings in sections:
        if not current or cls is not current[0][0]:
            text.append(_keys_of(name, bindings, plain))
    text.append("Anywhere\n", "bold")
    text.append("  ^p           commands (every action by name)\n")
    text.append("  i            what-if: weigh a policy change (list, case, model)\n")
    text.append("  ^q           quit (asks first if a note is not recorded)\n\n")
    if not on_list:
        text.append(list_columns(lens_names, reference))

    text.append("What the numbers mean\n", "bold underline")
    for name, meaning in MEANINGS:
        text.append(f"  {name}: ", "bold")
        text.append(f"{meaning}\n")
    text.append("\nCautions\n", "bold underline")
    for c in CAUTIONS:
        text.append(f"  ! {c}\n")
    return text


class HelpScreen(Screen[None]):
    """Keys, meanings and cautions."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "back", "back", key_display="esc"),
        Binding("question_mark,f1", "app.help", "help", key_display="?"),
        Binding("down,j", "scroll('down')", "down", show=False),
        Binding("up,k", "scroll('up')", "up", show=False),
    ]

    def __init__(
        self,
        model_names: list[str],
        lens_names: list[str],
        reference: str,
        here: type | None = None,
        plain: bool = False,
    ) -> None:
        super().__init__()
        self.here = here
        self._text = help_text(model_names, lens_names, reference, here, plain)

    def compose(self) -> ComposeResult:
        yield Static(Text("Help ─ keys, meanings, cautions", style="bold"), id="title")
        with VerticalScroll(id="help-body"):
            yield Static(self._text, id="help-text")
        yield KeyBar(self.BINDINGS, id="keys")

    def on_mount(self) -> None:
        self.query_one("#help-body").focus()

    def action_scroll(self, direction: str) -> None:
        body = self.query_one("#help-body", VerticalScroll)
        if direction == "down":
            body.scroll_down()
        else:
            body.scroll_up()

    def action_back(self) -> None:
        self.dismiss()
