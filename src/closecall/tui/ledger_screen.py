"""The ledger, a page at a time (filter by reviewer or case), one entry in full, the chain's state.

Only the page shown is read: older pages come from an indexed range read (entries numbered below
the page's oldest), so paging costs the same at entry 100,000 as at entry 1,000.
"""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual import events, on, work
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, VerticalScroll
from textual.screen import Screen
from textual.timer import Timer
from textual.widgets import DataTable, Input, Static

from closecall.api.study import Ledger
from closecall.core.errors import UserError
from closecall.core.text import safe_text, signed
from closecall.review.ledger import Entry, VerifyResult
from closecall.tui.key_bar import KeyBar
from closecall.tui.marks import ACTION_SHORT, ACTION_WORD
from closecall.tui.session import ReviewSession

PAGE = 500  # entries listed at a time (the newest page first)
FILTER_PAUSE_SECONDS = 0.3


TITLE_PATH_CELLS = 68  # fits the title line at 80 columns
WIDE = 110  # from this width the table has a reason column (the entry below always shows it)
REVIEWER_CELLS, CASE_CELLS, REASON_CELLS = 12, 14, 24  # cut in the table, whole below it
COLUMN_NAMES = ("seq", "UTC", "reviewer", "case", "action", "reason")  # then "note"


FILTER_PROMPT = {
    "reviewer": "type a reviewer's login (exact) · ⏎ apply · esc back to the entries",
    "case": "type a case id (exact) · ⏎ apply · esc back to the entries",
}


class LedgerScreen(Screen[None]):
    """Ledger entries a page at a time, newest first; ``<``/``>`` page back and forth."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "back", "back", key_display="esc"),
        Binding("enter", "open_entry", "full", key_display="⏎"),
        Binding("w", "filter('reviewer')", "reviewer"),
        Binding("slash", "filter('case')", "case", key_display="/"),
        Binding("less_than_sign", "page('older')", "older", key_display="<"),
        Binding("greater_than_sign", "page('newer')", "newer", key_display=">"),
        Binding("t", "page('newest')", "newest"),
        Binding("v", "verify", "verify"),
        Binding("question_mark,f1", "app.help", "help", key_display="?"),
    ]

    def __init__(self, session: ReviewSession, case_id: str | None = None) -> None:
        super().__init__()
        self.session = session
        self.initial_case = case_id
        self.entries: list[Entry] = []  # the page shown, newest first
        self.has_older = False
        self._pages: list[int | None] = [None]  # "before" of each page from the newest down
        self._wanted: list[int | None] = [None]
        self._generation = 0  # only the latest request's page is shown
        self._timer: Timer | None = None
        self.shown: Entry | None = None  # the entry shown below the table
        self.verified_once = False
        self.with_reason = True

    def compose(self) -> ComposeResult:
        where = str(self.session.config.review.ledger)
        if len(where) > TITLE_PATH_CELLS:  # keep the file name: cut the front of the path
            where = "…" + where[-(TITLE_PATH_CELLS - 1) :]
        yield Static(Text(f"Ledger ─ {where}", no_wrap=True, overflow="ellipsis"), id="title")
        yield Static("chain … checking", id="chain", markup=False)
        with Horizontal(id="ledger-filters"):
            yield Static("reviewer ", classes="field-label")
            yield Input(placeholder="any", id="by-reviewer", compact=True)
            yield Static("  case ", classes="field-label")
            yield Input(
                value=self.initial_case or "", placeholder="any", id="by-case", compact=True
            )
            yield Static("", id="page", markup=False)
        table: DataTable[Text] = DataTable(id="entries", cursor_type="row", zebra_stripes=False)
        yield table
        with VerticalScroll(id="entry-detail-box"):
            yield Static("", id="entry-detail", markup=False)
        yield Static("", id="status", markup=False)
        yield KeyBar(self.BINDINGS, id="keys")

    def on_mount(self) -> None:
        table = self.query_one("#entries", DataTable)
        self.with_reason = self.size.width >= WIDE
        names = COLUMN_NAMES if self.with_reason else COLUMN_NAMES[:-1]
        table.add_columns(*names, "note")
        table.focus()
        self._request([None])
        self.action_verify()

    # ------------------------------------------------------------------ loading

    def _filters(self) -> tuple[str | None, str | None]:
        if not self.is_attached:
            return None, None
        reviewer = self.query_one("#by-reviewer", Input).value.strip() or None
        case = self.query_one("#by-case", Input).value.strip() or None
        return reviewer, case

    def _request(self, pages: list[int | None]) -> None:
        """Read the page ``pages[-1]`` (entries before that seq; None: the newest) in a worker."""
        if not self.is_attached:  # a filter's timer may fire after the screen closed
            return
        self._generation += 1
        self._wanted = pages
        self.query_one("#page", Static).update("  reading…")
        self._load(self._generation, pages[-1])

    @work(thread=True, group="ledger-entries")
    def _load(self, generation: int, before: int | None) -> None:
        reviewer, case = self.app.call_from_thread(self._filters)
        try:
            shown = Ledger(self.session.config).show(
                case_id=case, reviewer=reviewer, limit=PAGE + 1, before=before
            )
            entries = list(shown.entries)
        except UserError as exc:
            self.app.call_from_thread(self._show_detail, f"✗ {exc.message}")
            return
        self.app.call_from_thread(self._fill, generation, entries)

    def _fill(self, generation: int, entries: list[Entry]) -> None:
        if generation != self._generation or not self.is_attached:  # overtaken, or closed
            return
        self._pages = self._wanted
        self.has_older = len(entries) > PAGE  # one extra entry read only to know this
        self.entries = list(reversed(entries[-PAGE:]))  # newest first
        self.query_one("#page", Static).update(self._page_label())
        table = self.query_one("#entries", DataTable)
        table.clear()
        note_w = self._note_cells()
        for e in self.entries:
            cells = [
                Text(str(e.seq)),
                Text(e.time[5:16].replace("T", " ")),
                Text(safe_text(e.reviewer)[:REVIEWER_CELLS]),
                Text(safe_text(e.case_id)[:CASE_CELLS]),
                Text(ACTION_SHORT.get(e.action, e.action)),
            ]
            if self.with_reason:
                cells.append(Text(_preview(e.reason or "—", REASON_CELLS)))
            cells.append(Text(_preview(e.note, note_w)))
            table.add_row(*cells, key=str(e.seq))
        if not self.entries:
            self._show_detail("no entries match" if any(self._filters()) else "no entries yet")
        else:
            self._show_entry(self.entries[0])

    def _note_cells(self) -> int:
        """Cells left for the note preview on this page: the screen less the other columns
        (each as wide as its widest cell on the page, padded one cell either side)."""
        widths = [
            max((len(str(e.seq)) for e in self.entries), default=3),
            11,
            max((len(safe_text(e.reviewer)[:REVIEWER_CELLS]) for e in self.entries), default=8),
            max((len(safe_text(e.case_id)[:CASE_CELLS]) for e in self.entries), default=4),
            max(len(a) for a in ACTION_SHORT.values()),
        ]
        if self.with_reason:
            widths.append(
                max((len((e.reason or "—")[:REASON_CELLS]) for e in self.entries), default=6)
            )
        used = sum(max(w, len(h)) + 2 for w, h in zip(widths, COLUMN_NAMES, strict=False))
        return max(12, min(60, self.size.width - used - 2 - 1))  # the note's padding, scroll bar

    @on(Input.Changed)
    def _filter_changed(self) -> None:
        if self._timer is not None:
            self._timer.stop()
        self._timer = self.set_timer(FILTER_PAUSE_SECONDS, lambda: self._request([None]))

    @on(Input.Submitted)
    def _filter_done(self) -> None:
        self.query_one("#entries", DataTable).focus()

    # ------------------------------------------------------------------ one entry

    @on(DataTable.RowHighlighted)
    def _highlighted(self, event: DataTable.RowHighlighted) -> None:
        seq = int(str(event.row_key.value))
        for e in self.entries:
            if e.seq == seq:
                self._show_entry(e)
                return

    def _show_entry(self, e: Entry) -> None:
        self.shown = e
        self.query_one("#entry-detail", Static).update(entry_text(e))
        self.query_one("#entry-detail-box", VerticalScroll).scroll_home(animate=False)

    def action_open_entry(self) -> None:
        """The entry under the cursor in full, on its own scrolling screen."""
        if self.shown is not None:
            self.app.push_screen(EntryScreen(self.shown))

    @on(DataTable.RowSelected)
    def _selected(self, event: DataTable.RowSelected) -> None:
        event.stop()
        self.action_open_entry()

    def _show_detail(self, message: str) -> None:
        if not self.is_attached:
            return
        self.shown = None
        self.query_one("#entry-detail", Static).update(message)

    def say(self, message: str) -> None:
        self.query_one("#status", Static).update(message)

    # ------------------------------------------------------------------ chain

    def action_verify(self) -> None:
        self.query_one("#chain", Static).update("chain … checking")
        if self.verified_once:  # the first check runs on opening; say when a later one ends
            self.say("checking the chain again…")
        self._verify()

    @work(thread=True, exclusive=True, group="ledger-verify")
    def _verify(self) -> None:
        try:
            # during a session a ledger with no entries yet is normal (`ledger verify` says so)
            result = Ledger(self.session.config).verify(allow_empty=True)
        except UserError as exc:
            self.app.call_from_thread(self._chain_text, f"chain ? cannot check: {exc.message}")
            return
        self.app.call_from_thread(self._chain_text, chain_state(result))

    def _chain_text(self, text: str) -> None:
        if not self.is_attached:
            return
        self.query_one("#chain", Static).update(text)
        if self.verified_once:
            now = self.session.clock().strftime("%H:%M:%S")
            self.say(f"chain checked again at {now} UTC: {text.split(' · ')[0]}")
        self.verified_once = True

    # ------------------------------------------------------------------ keys

    def action_page(self, which: str) -> None:
        """Show the older or newer page, or the newest one (any filters stay)."""
        if which == "older":
            if not self.entries or not self.has_older:
                self.app.bell()  # the oldest page is shown; its label says so
                return
            self._request([*self._pages, self.entries[-1].seq])
        elif which == "newer":
            if len(self._pages) == 1:
                self.app.bell()  # the newest page is shown
                return
            self._request(self._pages[:-1])
        else:
            self._request([None])
        self.query_one("#entries", DataTable).focus()

    def _page_label(self) -> str:
        """Where the page sits: its number back from the newest, its entries, the oldest?"""
        page = len(self._pages)
        where = "newest" if page == 1 else f"{page - 1} back"
        if not self.entries:
            return f"  page {page} ({where})"
        span = f"{self.entries[-1].seq:,}–{self.entries[0].seq:,}"
        end = "" if self.has_older else " · oldest"
        return f"  page {page} ({where}) · {span}{end}"

    def action_filter(self, which: str) -> None:
        self.query_one(f"#by-{which}", Input).focus()

    def on_descendant_focus(self, event: events.DescendantFocus) -> None:
        """A filter field took the keys: say what to type and how to leave it."""
        if isinstance(event.widget, Input):
            which = "reviewer" if event.widget.id == "by-reviewer" else "case"
            self.say(FILTER_PROMPT[which])

    def on_descendant_blur(self, event: events.DescendantBlur) -> None:
        if isinstance(event.widget, Input):
            self.say("")

    def action_back(self) -> None:
        if isinstance(self.focused, Input):
            self.query_one("#entries", DataTable).focus()
            return
        self.dismiss()


def entry_text(e: Entry) -> Text:
    """One entry in full: what, by whom, when, the model's view, the whole note, the hash."""
    margin = "—" if e.reference_margin is None else signed(e.reference_margin)
    text = Text()
    text.append(f"entry {e.seq}", "bold")
    text.append(f" · {safe_text(e.case_id)} · {ACTION_WORD.get(e.action, e.action)}")
    if e.reason:
        text.append(f" ({safe_text(e.reason)})")
    text.append(f" · by {safe_text(e.reviewer)} · {e.time[:19].replace('T', ' ')} UTC")
    if e.supersedes is not None:
        text.append(f" · corrects entry {e.supersedes}")
    text.append(f"\nmodel {e.reference_model}: {e.reference_decision} {margin}")
    text.append(f" · snapshot {e.snapshot_id[:12]}\n")
    note = safe_text(e.note.strip(), multiline=True)
    text.append(note or "(no note)")
    text.append(f"\nhash {e.hash}")
    return text


class EntryScreen(Screen[None]):
    """One ledger entry in full (the whole note, wrapped); esc goes back."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "back", "back", key_display="esc"),
        Binding("question_mark,f1", "app.help", "help", key_display="?"),
        Binding("down,j", "scroll(1)", "scroll down", show=False),
        Binding("up,k", "scroll(-1)", "scroll up", show=False),
        Binding("pagedown,space", "page(1)", "page down", show=False),
        Binding("pageup,b", "page(-1)", "page up", show=False),
    ]

    def __init__(self, entry: Entry) -> None:
        super().__init__()
        self.entry = entry

    def compose(self) -> ComposeResult:
        title = f"Ledger entry {self.entry.seq} ─ {safe_text(self.entry.case_id)}"
        yield Static(Text(title, no_wrap=True, overflow="ellipsis"), id="title")
        with VerticalScroll(id="entry-body"):
            yield Static(entry_text(self.entry), id="entry-full", markup=False)
        yield KeyBar(self.BINDINGS, id="keys")

    def on_mount(self) -> None:
        self.query_one("#entry-body").focus()

    def action_scroll(self, step: int) -> None:
        self.query_one("#entry-body", VerticalScroll).scroll_relative(y=step, animate=False)

    def action_page(self, step: int) -> None:
        body = self.query_one("#entry-body", VerticalScroll)
        body.scroll_relative(y=step * max(1, body.size.height - 1), animate=False)

    def action_back(self) -> None:
        self.dismiss()


def chain_state(result: VerifyResult) -> str:
    """One line: verified, or broken at which entry and why."""
    if result.ok:
        return (
            f"chain ✓ verified · {result.entries} entries · head {result.head_seq} "
            f"{result.head_hash[:16]}…"
        )
    where = f"entry {result.first_broken}" if result.first_broken else "the chain"
    message = result.problem.message if result.problem else "see closecall ledger verify"
    return f"chain ✗ BROKEN at {where} ({result.verified} good before it): {message}"


def _preview(note: str, width: int) -> str:
    flat = safe_text(" ".join(note.split()))
    return flat if len(flat) <= width else flat[: width - 1] + "…"
