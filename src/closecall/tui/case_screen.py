"""One case: every model's margin on one axis, why it is close, its counterparts and history."""

from __future__ import annotations

import contextlib
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, ClassVar, Protocol, runtime_checkable

from rich.text import Text
from scipy.special import logit
from textual import events, work
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.screen import Screen
from textual.widgets import Static
from textual.worker import get_current_worker

from closecall.api.study import Study
from closecall.core.errors import UserError
from closecall.core.text import safe_text, signed
from closecall.core.vocabulary import OPEN, STATE_OF_ACTION, decision_word
from closecall.review.ledger import Draft, Entry
from closecall.suite.fit_flags import PROBLEM_WORDS
from closecall.tui import analysis_bridge, card_section, case_sections
from closecall.tui.access_guard import may_decide
from closecall.tui.key_bar import KeyBar
from closecall.tui.margin_axis import AxisData, AxisLine, MarginAxis
from closecall.tui.marks import AMBIGUOUS, CLAIM_MINE, CLAIM_OTHER, STATE_WORD
from closecall.tui.session import ReviewSession

Neighbour = Callable[[int, int], "int | None"]
WIDE = 110  # from this width the sections sit in two columns


@runtime_checkable
class RecordListener(Protocol):
    """A screen that lists cases and updates a row when an entry is recorded (the queue)."""

    def recorded(self, entry: Entry) -> None: ...


@dataclass
class CaseDetails:
    """What the worker gathers for one case."""

    row: int
    explained: dict[str, Any] | None
    half: dict[str, float | None]
    history: list[Entry]
    draft: Draft | None
    error: str | None = None


def axis_data(session: ReviewSession, row: int, half: dict[str, float | None]) -> AxisData:
    """Every model's margin and band for one case, lens thresholds as offsets (cheap)."""
    snap = session.snap
    lenses = snap.lenses
    t = [float(logit(lens.threshold)) for lens in lenses]
    lines = []
    for m in snap.model_names:
        lg = float(snap.logit(m)[row])
        lines.append(
            AxisLine(
                name=m,
                margin=lg - t[0],
                half=half.get(m),
                favourable=[lg > tk for tk in t],
                reference=m == snap.reference,
            )
        )
    return AxisData(lines, [lens.name for lens in lenses], [tk - t[0] for tk in t])


def section(title: str) -> Static:
    return Static(Text(f"▌{title}", style="bold"), classes="section-title")


class CaseScreen(Screen[None]):
    """Everything about one case, and the way to decide it."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("d", "decide", "decide"),
        Binding("n", "step(1)", "next"),
        Binding("p", "step(-1)", "previous"),
        Binding("l", "ledger", "its ledger"),
        Binding("escape", "back", "back", key_display="esc"),
        Binding("question_mark,f1", "app.help", "help", key_display="?"),
        Binding("down,j", "scroll(1)", "scroll down", show=False),
        Binding("up,k", "scroll(-1)", "scroll up", show=False),
        Binding("pagedown,space", "page(1)", "page down", show=False),
        Binding("pageup,b", "page(-1)", "page up", show=False),
    ]

    def __init__(self, session: ReviewSession, row: int, neighbour: Neighbour | None = None):
        super().__init__()
        self.session = session
        self.row = row
        self.neighbour = neighbour
        self.details: CaseDetails | None = None

    @property
    def case_id(self) -> str:
        return str(self.session.snap.case_ids[self.row])

    # ------------------------------------------------------------------ layout

    def compose(self) -> ComposeResult:
        yield Static(id="title")
        yield Static(id="case-summary")
        with VerticalScroll(id="case-body"):
            yield section("Margins on one axis")
            yield MarginAxis(axis_data(self.session, self.row, {}), id="axis")
            with Horizontal(id="case-columns"):
                with Vertical(id="case-left"):
                    yield section("What moves the margin")
                    yield Static("…", id="contributions")
                    yield section("Group and proxy parts")
                    yield Static("…", id="parts")
                    if "deployed_card" in self.session.snap.meta:  # issue 15: tui/card_section
                        yield section("The deployed scorecard's own reasons")
                        yield Static("…", id="card")
                with Vertical(id="case-right"):
                    yield section("Counterparts in the other groups")
                    yield Static("…", id="counterparts")
                    yield section("Similar past cases")
                    yield Static("…", id="similar")
                    yield section("This case in the ledger")
                    yield Static("…", id="history")
                    yield section("Draft note")
                    yield Static("…", id="draft")
        yield Static("", id="status", markup=False)
        yield KeyBar(self.BINDINGS, id="keys")

    def on_mount(self) -> None:
        self.query_one("#case-body").focus()
        self._layout(self.size.width)
        self.show(self.row)

    def on_resize(self, event: events.Resize) -> None:
        self._layout(event.size.width)

    def _layout(self, width: int) -> None:
        self.set_class(width >= WIDE, "-wide")

    # ------------------------------------------------------------------ content

    def show(self, row: int) -> None:
        """Show another case: the cheap parts now, the rest from a worker."""
        self.row = row
        self.details = None
        self._title()
        self.query_one(MarginAxis).update_data(axis_data(self.session, row, {}))
        for name in ("contributions", "parts", "counterparts", "similar", "history", "draft"):
            self.query_one(f"#{name}", Static).update("…")
        for card in self.query("#card").results(Static):
            card.update("…")
        self.query_one("#case-body", VerticalScroll).scroll_home(animate=False)
        self._load(row)

    def _title(self) -> None:
        session, row = self.session, self.row
        snap = session.snap
        text = Text(no_wrap=True, overflow="ellipsis")
        text.append(f"Case {safe_text(self.case_id)}", "bold")
        if snap.group_levels:
            text.append(f" · {safe_text(str(snap.group_labels[row]))}")
        pos = session.position_of_row(row)
        q = session.queue
        if pos >= 0 and q is not None:
            text.append(f" · {pos + 1:,} of {len(q):,} listed")
        code = int(session.states[row])
        state = STATE_WORD[code]
        others = session.claimed_by_others(self.case_id)
        if code == OPEN and others:  # "open" is the state (undecided); a claim is a claim
            state += f" · {CLAIM_OTHER} claimed by {safe_text(', '.join(others))}"
        elif code == OPEN:
            state += f" · {CLAIM_MINE} claimed by you"
        text.append(f" · {state}")
        self.query_one("#title", Static).update(text)
        self.query_one("#case-summary", Static).update(
            case_summary(session, row, self.details.explained if self.details else None)
        )

    @work(thread=True, exclusive=True, group="case")
    def _load(self, row: int) -> None:
        worker = get_current_worker()
        session = self.session
        case_id = str(session.snap.case_ids[row])
        try:
            Study(session.study).claim(case_id, session.instance)
            half = {m: session.half_width(m, row) for m in session.snap.model_names}
            explained = analysis_bridge.explain(session.study, case_id)
            history = Study(session.study).history(case_id)
            draft = Study(session.study).load_draft(case_id)
            session.claims = Study(session.study).claims()
            details = CaseDetails(row, explained, half, history, draft)
        except UserError as exc:
            details = CaseDetails(row, None, {}, [], None, error=exc.message)
        if not worker.is_cancelled:
            self.app.call_from_thread(self._fill, details)

    def _fill(self, details: CaseDetails) -> None:
        if details.row != self.row:
            return
        self.details = details
        self._title()
        if details.error:
            self.say(f"✗ {details.error}")
        self.query_one(MarginAxis).update_data(axis_data(self.session, self.row, details.half))
        width = self.query_one("#contributions").size.width or 78
        d = details.explained
        if d is None:
            missing = Text("needs the analysis module (closecall.analysis.explain)")
            for name in ("contributions", "parts", "counterparts", "similar"):
                self.query_one(f"#{name}", Static).update(missing)
        else:
            self.query_one("#contributions", Static).update(case_sections.contributions(d, width))
            self.query_one("#parts", Static).update(case_sections.parts(d))
            for card in self.query("#card").results(Static):
                card.update(card_section.card_reasons(d))
            self.query_one("#counterparts", Static).update(case_sections.counterparts(d))
            self.query_one("#similar", Static).update(case_sections.similar(d))
        self.query_one("#history", Static).update(case_sections.history(details.history))
        self.query_one("#draft", Static).update(case_sections.draft(details.draft))

    def say(self, message: str) -> None:
        self.query_one("#status", Static).update(message)

    # ------------------------------------------------------------------ actions

    def action_decide(self) -> None:
        from closecall.tui.decision_dialog import DecisionDialog

        if not may_decide(self):
            return
        self.app.push_screen(DecisionDialog(self.session, self.case_id, claim=False), self._decided)

    def _decided(self, entry: Entry | None) -> None:
        if entry is not None:
            self.say(f"recorded entry {entry.seq} · hash {entry.hash[:16]}… · n for the next case")
            for screen in self.app.screen_stack:
                if isinstance(screen, RecordListener):  # the queue screen, without importing it
                    screen.recorded(entry)
            self.session.states[self.row] = STATE_OF_ACTION[entry.action]
        self.show(self.row)

    def action_step(self, step: int) -> None:
        if self.neighbour is None:
            return
        target = self.neighbour(self.row, step)
        if target is None:
            self.say("no more cases in that direction in the list")
            return
        self._release(self.case_id)
        self.say("")
        self.show(target)

    def action_ledger(self) -> None:
        from closecall.tui.ledger_screen import LedgerScreen

        self.app.push_screen(LedgerScreen(self.session, case_id=self.case_id))

    def action_back(self) -> None:
        self._release(self.case_id)
        self.dismiss()

    @work(thread=True, group="claims")
    def _release(self, case_id: str) -> None:
        with contextlib.suppress(UserError):  # a claim is advice and expires by itself
            Study(self.session.study).release_claim(case_id, self.session.instance)

    def action_scroll(self, step: int) -> None:
        body = self.query_one("#case-body", VerticalScroll)
        body.scroll_relative(y=step, animate=False)

    def action_page(self, step: int) -> None:
        body = self.query_one("#case-body", VerticalScroll)
        body.scroll_relative(y=step * max(1, body.size.height - 1), animate=False)


def case_summary(session: ReviewSession, row: int, explained: dict[str, Any] | None) -> Text:
    """One line on why this case is here: the decision, who disagrees, what it rests on."""
    snap = session.snap
    answer = session.answer
    margin = float(snap.margins(snap.reference)[row])
    text = Text()
    text.append(f"{snap.reference}: {decision_word(margin > 0)} {signed(margin)}", "bold")
    if answer is not None:  # who decides otherwise, by name
        names = answer.others_differ(row)
        text.append(f" · {safe_text(', '.join(names))} differ" if names else " · all agree")
    if explained is not None:
        if explained["bands"]["equally_good"]["straddles_zero"]:
            text.append(f" · {AMBIGUOUS} ambiguous")
        dep = explained["dependence"]
        if dep["rests_on_group"]:
            text.append(" · rests on group")
        elif dep["rests_on_proxies"]:
            text.append(" · rests on proxies")
    flags = Study(session.study).fit_flags(str(snap.case_ids[row]))
    if flags:  # the fits that scored this case were kept despite separation or the like
        words = sorted(
            {f"{f['model']} ({PROBLEM_WORDS.get(f['problem'], f['problem'])})" for f in flags}
        )
        text.append(
            f"\n{FIT_FLAG} fit flagged: {safe_text(', '.join(words))} — see closecall fit", "bold"
        )
    return text


FIT_FLAG = "⚑"
