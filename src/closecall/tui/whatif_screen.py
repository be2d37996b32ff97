"""The what-if screen: weigh a policy change against the decision in force (``closecall whatif``).

A list of policies worth weighing (the deployed scorecard without each feature's weight, the
other models of the suite, the other cost lenses, a threshold for one group), and for the one
chosen: decisions changed by group and direction, favourable rates and adverse impact ratios,
held-out error rates, each with intervals, beside the decision in force — or beside a second
policy (``e``: compare with the policy under the cursor). ``x`` lists the changed cases on the
close-call list. Every figure is the engine's (closecall.analysis.whatif_figures); docs/whatif.md
explains them.
"""

from __future__ import annotations

import math
from typing import Any, ClassVar

from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, VerticalScroll
from textual.screen import Screen
from textual.widgets import Input, OptionList, Static
from textual.widgets.option_list import Option

from closecall.analysis.whatif import Policy
from closecall.api.study import Study
from closecall.core.errors import UserError
from closecall.core.text import safe_text
from closecall.tui.key_bar import KeyBar
from closecall.tui.session import ReviewSession

GROUP_THRESHOLD = "threshold"  # the option that asks for LEVEL=P


def _pct(x: float | None) -> str:
    return "—" if x is None or not math.isfinite(x) else f"{100 * x:.1f}%"


def _ratio(x: float | None) -> str:
    return "—" if x is None or not math.isfinite(x) else f"{x:.2f}"


def _span(lo: float | None, hi: float | None, fmt: Any) -> str:
    return "" if lo is None or hi is None else f"{fmt(lo)}–{fmt(hi)}"


def figures_text(data: dict[str, Any], width: int = 78) -> Text:
    """The figures of a what-if as aligned plain lines (each at most ``width`` wide)."""
    out = Text(no_wrap=True, overflow="ellipsis")
    pct = f"{data['level']:.0%}"
    total = data["total"]
    names = [safe_text(c["group"]) for c in data["changes"]]
    gw = min(max(len(n) for n in [*names, "group"]) + 2, 24)  # group column, longest level
    out.append(f"baseline: {safe_text(data['baseline']['label'])}\n")
    out.append(f"policy:   {safe_text(data['policy']['label'])}\n", "bold")
    out.append(
        f"{total['changed']:,} of {total['cases']:,} decisions change: "
        f"{total['to_favourable']:,} to favourable, {total['to_unfavourable']:,} to unfavourable\n"
    )
    out.append("\nDecisions that change\n", "bold underline")
    out.append(f"{'group':<{gw}}{'cases':>7}{'changed':>9}{'→ fav':>7}{'→ unfav':>9}")
    out.append(f"  share ({pct})\n")
    for c in [*data["changes"], total]:
        out.append(
            f"{safe_text(c['group'])[: gw - 1]:<{gw}}{c['cases']:>7,}{c['changed']:>9,}"
            f"{c['to_favourable']:>7,}{c['to_unfavourable']:>9,}  {_pct(c['share'])} "
            f"({_span(c['share_low'], c['share_high'], _pct)})\n"
        )
    out.append(f"\nFavourable rate and adverse impact ratio (AIR), {pct}\n", "bold underline")
    for side, name in (("baseline", "baseline"), ("policy", "policy")):
        figures = data[side]
        for r in figures["rates"]:
            most = r["group"] == figures["most_favoured"]
            air = "most favoured" if most else _span(r["air_low"], r["air_high"], _ratio)
            flag = " below 4/5" if r["below_four_fifths"] else ""
            out.append(
                f"{safe_text(r['group'])[: gw - 1]:<{gw}}{name:<9}{_pct(r['rate']):>6} "
                f"({_span(r['low'], r['high'], _pct)})  AIR {_ratio(r['air'])} ({air}){flag}\n"
            )
    if data["baseline"]["errors"] or data["policy"]["errors"]:
        out.append(f"\nHeld-out error rates on the history, {pct}\n", "bold underline")
        out.append(f"{'group':<{gw}}{'':<9}{'false-favourable':<24}false-unfavourable\n")
        for side, name in (("baseline", "baseline"), ("policy", "policy")):
            for r in data[side]["errors"]:
                ff = _span(r["false_favourable_low"], r["false_favourable_high"], _pct)
                fu = _span(r["false_unfavourable_low"], r["false_unfavourable_high"], _pct)
                out.append(
                    f"{safe_text(r['group'])[: gw - 1]:<{gw}}{name:<9}"
                    f"{_pct(r['false_favourable_rate']) + ' (' + ff + ')':<24}"
                    f"{_pct(r['false_unfavourable_rate'])} ({fu})\n"
                )
    notes = [*data["baseline"]["notes"], *data["policy"]["notes"], *data["notes"]]
    for note in dict.fromkeys(notes):
        out.append(f"\nnote: {safe_text(note)}", "italic")
    out.append(
        "\n\nThe counts are exact for the cases under review; the intervals read them as a "
        "sample. Evidence for review, not a decision (docs/whatif.md)."
    )
    return _wrapped(out, width)


def _wrapped(text: Text, width: int) -> Text:
    """Long lines (notes) folded at ``width`` so nothing is cut at 80 columns."""
    lines = text.split("\n", allow_blank=True)
    out = Text(no_wrap=True)
    for i, line in enumerate(lines):
        for j, part in enumerate(line.wrap(_console(), width) if len(line) > width else [line]):
            if i or j:
                out.append("\n")
            out.append_text(part)
    return out


def _console() -> Any:
    from rich.console import Console

    return Console(width=200)


class WhatIfScreen(Screen[None]):
    """Policies to weigh and the chosen one's figures; esc goes back."""

    DEFAULT_CSS = """
    WhatIfScreen #policies { height: 6; border: none; padding: 0; }
    WhatIfScreen #policies:focus { border: none; }
    WhatIfScreen #threshold-row { height: 1; }
    WhatIfScreen #threshold-label { width: auto; }
    WhatIfScreen #threshold { height: 1; border: none; padding: 0; width: 1fr; }
    WhatIfScreen #whatif-body { height: 1fr; }
    WhatIfScreen #whatif-status { height: 1; }
    """
    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "back", "back", key_display="esc"),
        Binding("enter", "weigh", "open", key_display="⏎"),
        Binding("e", "compare", "compare with this"),
        Binding("x", "list_changed", "changed cases to the list"),
        Binding("question_mark,f1", "app.help", "help", key_display="?"),
        Binding("pagedown", "page(1)", "page down", show=False),
        Binding("pageup", "page(-1)", "page up", show=False),
    ]

    def __init__(self, session: ReviewSession) -> None:
        super().__init__()
        self.session = session
        self.policies: list[Policy] = []
        self.against: Policy | None = None  # None: the decision in force
        self.shown: Policy | None = None
        self.data: dict[str, Any] | None = None

    def compose(self) -> ComposeResult:
        yield Static(
            Text("What-if ─ a policy change against the decision in force", no_wrap=True),
            id="title",
        )
        yield OptionList(id="policies")
        with Horizontal(id="threshold-row"):
            yield Static("group threshold ", id="threshold-label")
            yield Input(placeholder="LEVEL=P, e.g. Briar=0.45", id="threshold")
        with VerticalScroll(id="whatif-body"):
            yield Static("choose a policy and press ⏎", id="figures", markup=False)
        yield Static("", id="whatif-status", markup=False)
        yield KeyBar(self.BINDINGS, id="keys")

    def on_mount(self) -> None:
        options = self.query_one("#policies", OptionList)
        self.query_one("#threshold-row").display = False
        try:
            self.policies = Study(self.session.study).policy_choices()
        except UserError as exc:
            self.say(f"✗ {exc.message}")
        base = Study(self.session.study).baseline_model
        for i, p in enumerate(self.policies):
            options.add_option(Option(safe_text(p.label(base)), id=str(i)))
        levels = ", ".join(self.session.snap.group_levels)
        options.add_option(Option(f"a threshold for one group ({levels})…", id=GROUP_THRESHOLD))
        options.focus()
        if self.policies:
            options.highlighted = 0
            self.weigh(self.policies[0])

    def say(self, message: str) -> None:
        self.query_one("#whatif-status", Static).update(message)

    # ------------------------------------------------------------------ choosing

    def _highlighted(self) -> str | None:
        options = self.query_one("#policies", OptionList)
        if options.highlighted is None:
            return None
        return options.get_option_at_index(options.highlighted).id

    @on(OptionList.OptionSelected, "#policies")
    def _selected(self, event: OptionList.OptionSelected) -> None:
        self.action_weigh()

    def action_weigh(self) -> None:
        which = self._highlighted()
        if which == GROUP_THRESHOLD:
            row = self.query_one("#threshold-row")
            row.display = True
            self.query_one("#threshold", Input).focus()
            self.say("type LEVEL=P and press ⏎ (esc: back to the list)")
            return
        if which is not None:
            self.weigh(self.policies[int(which)])

    @on(Input.Submitted, "#threshold")
    def _threshold(self, event: Input.Submitted) -> None:
        try:
            policy = Policy.parse(f"threshold={event.value}")
        except UserError as exc:
            self.say(f"✗ {exc.problem}")
            return
        self.query_one("#threshold-row").display = False
        self.query_one("#policies", OptionList).focus()
        self.weigh(policy)

    def action_compare(self) -> None:
        which = self._highlighted()
        if which is None or which == GROUP_THRESHOLD:
            self.against = self.shown if which == GROUP_THRESHOLD else None
        else:
            chosen = self.policies[int(which)]
            self.against = None if chosen == self.against else chosen
        self.say(
            "comparing with the decision in force"
            if self.against is None
            else f"comparing with: {self.against.label(Study(self.session.study).baseline_model)}"
        )
        if self.shown is not None:
            self.weigh(self.shown)

    # ------------------------------------------------------------------ figures

    def weigh(self, policy: Policy) -> None:
        self.shown = policy
        self.say("weighing…")
        self._compute(policy, self.against)

    @work(thread=True, exclusive=True, group="whatif")
    def _compute(self, policy: Policy, against: Policy | None) -> None:
        try:
            data = dict(Study(self.session.study).weigh(policy, against).data)
        except UserError as exc:
            self.app.call_from_thread(self._show, None, f"✗ {exc.message}")
            return
        self.app.call_from_thread(self._show, data, "")

    def _show(self, data: dict[str, Any] | None, message: str) -> None:
        self.data = data
        if data is None:
            self.say(message)
            return
        width = max(40, min(self.size.width, 120) - 2)
        self.query_one("#figures", Static).update(figures_text(data, width))
        changed = data["total"]["changed"]
        self.say(f"{changed:,} decisions change · x lists them · e compares with another policy")

    def action_list_changed(self) -> None:
        """The close-call list, narrowed to the cases this policy changes (queue filter)."""
        if self.shown is None or self.data is None:
            self.say("choose a policy first")
            return
        show = getattr(self.app, "show_changed_by", None)
        if show is None:
            self.say("the list cannot be narrowed from here")
            return
        show(self.shown.to_text())

    def action_page(self, step: int) -> None:
        body = self.query_one("#whatif-body", VerticalScroll)
        body.scroll_relative(y=step * max(body.size.height - 1, 1), animate=False)

    def action_back(self) -> None:
        row = self.query_one("#threshold-row")
        if row.display:
            row.display = False
            self.query_one("#policies", OptionList).focus()
            self.say("")
            return
        self.dismiss()
