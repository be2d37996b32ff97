"""The close-call list: counts, the margin chart per group, the cases, filters and id search."""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal
from textual.screen import Screen
from textual.widgets import Input, Static
from textual.worker import get_current_worker

from closecall.core.text import safe_text
from closecall.core.vocabulary import short_model
from closecall.review.ledger import Entry
from closecall.review.triage import TIER_KEYS, TIER_WORDS
from closecall.tui.access_guard import may_decide
from closecall.tui.ascii_mode import plus_minus
from closecall.tui.case_list import CaseList
from closecall.tui.key_bar import KeyBar
from closecall.tui.margin_chart import MarginChart
from closecall.tui.session import ListSettings, ReviewSession

#: How often others' claims and reviews are read again (this screen's own claims leave the
#: list's counts as soon as it leaves their case).
REFRESH_SECONDS = 15.0


class QueueScreen(Screen[None]):
    """The close calls, most urgent first."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("enter", "open_case", "open", key_display="⏎"),
        Binding("d", "decide", "decide"),
        Binding("slash", "search", "find id", key_display="/"),
        Binding("l", "app.ledger", "ledger"),
        Binding("m", "app.model", "model weights", show=False),
        Binding("question_mark,f1", "app.help", "help", key_display="?"),
        Binding("q", "app.quit", "quit"),
        Binding("ctrl+p", "app.command_palette", "commands", key_display="^p"),
        Binding(
            "s", "cycle_sort", "order: triage / flips first / ambiguity / dependence", show=False
        ),
        Binding("f", "cycle_flips", "flips: any / model / lens-only / off", show=False),
        Binding("a", "switch('ambiguous')", "ambiguous only", show=False),
        Binding("u", "switch('unreviewed')", "unreviewed only", show=False),
        Binding("g", "cycle_group", "next group", show=False),
        Binding("o", "cycle_rests_on", "rests on group / proxies / off", show=False),
        Binding("c", "clear_filters", "clear filters", show=False),
        Binding("r", "refresh", "read ledger again", show=False),
        Binding("escape", "cancel_search", "close search", show=False),
    ]

    def __init__(self, session: ReviewSession) -> None:
        super().__init__()
        self.session = session
        self._search_from: int | None = None
        self._last_position: dict[int, int] = {}

    def compose(self) -> ComposeResult:
        yield Static(self._title(), id="title")
        yield Static(id="counts")
        yield Static(id="settings")
        yield MarginChart(self.session, id="chart")
        yield CaseList(self.session, id="cases")
        with Horizontal(id="search-row"):
            yield Static("find id ", id="search-label")
            yield Input(placeholder="type the start of a case id", id="search")
        yield Static("", id="status", markup=False)
        yield KeyBar(self.BINDINGS, id="keys")

    def on_mount(self) -> None:
        chart = self.query_one(MarginChart)
        chart.styles.height = chart.lines_needed()
        for line in ("#counts", "#settings"):  # two lines at 80 columns, one when wider
            self.query_one(line).styles.height = "auto"
        self.query_one("#search-row").display = False
        self.query_one(CaseList).reload()
        self._show_counts()
        self.query_one(CaseList).focus()
        self.set_interval(REFRESH_SECONDS, self.action_refresh)
        if not self.session.measures_ready:
            self.say("measuring dependence and bands…")
            self._warm_up()

    @work(thread=True, group="measures")
    def _warm_up(self) -> None:
        self.session.warm_up()
        self.app.call_from_thread(self._measured)

    def _measured(self) -> None:
        if not self.is_mounted:  # the screen went (the app quit) while the warm-up ran
            return
        cases, status = self.query(CaseList), self.query("#status")
        if not cases or not status:  # being taken down: nothing left to redraw
            return
        cases.first().refresh()
        if str(status.first(Static).render()).startswith("measuring"):
            self.say("")

    # ------------------------------------------------------------------ header lines

    def _title(self) -> Text:
        """Tool, reviewer and snapshot always whole; the study's name shortened to fit."""
        snap = self.session.snap
        you = f" ─ you: {safe_text(self.session.display_login)}"
        tail = f" ─ snapshot {snap.id[:8]}"
        room = max(8, self.app.size.width - 2 - len("closecall review") - len(you) - len(tail) - 3)
        name = safe_text(self.session.config.name)
        name = name if len(name) <= room else name[: room - 1] + "…"
        text = Text(no_wrap=True, overflow="ellipsis")
        text.append("closecall review", "bold")
        text.append(you, "bold")
        text.append(f" ─ {name}{tail}")
        return text

    def _show_counts(self) -> None:
        """The counts (all of the listed cases), the triage tiers, then every switch."""
        c = self.session.counts()
        q = self.session.queue
        band = f"{self.session.band:g}"
        width = max(20, self.app.size.width - 2)
        counts = _count_lines(c, f"{plus_minus(self.app)}{band}", width)
        tiers = [
            (f"{c.get(f'tier_{key}', 0):,} {word}", "")
            for key, word in zip(TIER_KEYS, TIER_WORDS, strict=True)
            if c.get(f"tier_{key}", 0)
        ]
        same = q.same_as if q is not None else {}
        tiers += [(f"{short_model(m)} = {short_model(o)}", "") for m, o in same.items()]
        self.query_one("#counts", Static).update(
            Text("\n").join([*counts, *_packed(tiers, width, " · ", "why first: ")])
        )
        s = self.session.settings
        sort = q.sort if q else s.sort
        items: list[tuple[str, str]] = [
            ("s", f"order: {SORT_WORDS.get(sort, sort)}"),
            ("g", f"group: {_cut(safe_text(s.group), width - 12)}" if s.group else "group: all"),
            ("f", f"flips: {FLIP_WORDS.get(s.flips or '', 'off')}"),
            ("a", f"ambiguous {'●' if s.ambiguous else '○'}"),
            ("o", f"rests on: {s.rests_on or 'off'}"),
            ("u", f"unreviewed {'●' if s.unreviewed else '○'}"),
            ("c", "clear filters"),
        ]
        on = {"g": bool(s.group), "f": bool(s.flips), "a": s.ambiguous, "o": bool(s.rests_on),
              "u": s.unreviewed}  # fmt: skip
        parts: list[tuple[str, str]] = []
        for key, label in items:
            parts.append((f"{key}\0{label}", "bold" if on.get(key) else ""))
        if s.changed_by:  # from the what-if screen; c clears it with the rest
            parts.append((f"what-if: changed by {safe_text(s.changed_by)}", "bold"))
        lines = _packed(parts, width, "  ")
        for line in lines:  # the key letter in reverse video
            for start in [i for i, ch in enumerate(line.plain) if ch == "\0"]:
                line.stylize("bold reverse", start - 1, start)
        settings = Text("\n").join(lines)
        settings = Text(settings.plain.replace("\0", " "), spans=settings.spans)
        self.query_one("#settings", Static).update(settings)

    def on_resize(self) -> None:
        self.query_one("#title", Static).update(self._title())
        if self.session.queue is not None:
            self._show_counts()

    def say(self, message: str) -> None:
        self.query_one("#status", Static).update(message)

    # ------------------------------------------------------------------ list building

    def _apply(self, settings: ListSettings, keep_place: bool = False) -> None:
        """Rebuild the list; the cursor goes to the top unless ``keep_place`` (a refresh)."""
        self.say("ranking…")
        self._rebuild(settings, self.query_one(CaseList).current_row if keep_place else None)

    @work(thread=True, exclusive=True, group="queue")
    def _rebuild(self, settings: ListSettings, keep_row: int | None) -> None:
        worker = get_current_worker()
        self.session.rebuild(settings)
        if not worker.is_cancelled:
            self.app.call_from_thread(self._rebuilt, keep_row)

    def _rebuilt(self, keep_row: int | None) -> None:
        self.query_one(CaseList).reload(keep_row)
        self.query_one(MarginChart).refresh()  # it counts the cases the filters keep
        self._show_counts()
        q = self.session.queue
        if q is not None and not len(q):
            self.say("no case matches these filters (c clears them)")
        else:
            self.say(f"{self.session.settings.describe()}: {len(q) if q else 0:,} listed")

    def action_cycle_sort(self) -> None:
        sorts = self.session.available_sorts()
        current = self.session.settings.sort
        nxt = sorts[(sorts.index(current) + 1) % len(sorts)] if current in sorts else sorts[0]
        if len(sorts) <= 2:
            self.say("only triage and flips-first are available: no analysis measures here")
        self._apply(self._with(sort=nxt))

    def action_sort_by(self, name: str) -> None:
        self._apply(self._with(sort=name))

    def only_group(self, level: str | None) -> None:
        self._apply(self._with(group=level))

    def action_switch(self, name: str) -> None:
        if name == "ambiguous" and self._unavailable("ambiguous"):
            self.say("ambiguity is not available for this study (no band for its models)")
            return
        current = getattr(self.session.settings, name)
        if name == "flips":  # on/off from the command palette: any flip, or none
            self._apply(self._with(flips=None if current else "any"))
            return
        self._apply(self._with(**{name: not current}))

    def action_cycle_flips(self) -> None:
        steps: list[str | None] = [None, "any", "model", "lens"]
        current = self.session.settings.flips
        self._apply(self._with(flips=steps[(steps.index(current) + 1) % len(steps)]))

    def _unavailable(self, mask: str) -> bool:
        return self.session.measures_ready and self.session.peek_mask(mask) is None

    def action_cycle_rests_on(self) -> None:
        steps: list[str | None] = [None, "group", "proxies"]
        nxt = steps[(steps.index(self.session.settings.rests_on) + 1) % len(steps)]
        self.rests_on(nxt)

    def rests_on(self, part: str | None) -> None:
        """Only cases whose decision flips without the group (or the group and its proxies)."""
        self._apply(self._with(rests_on=part))

    def action_cycle_group(self) -> None:
        levels: list[str | None] = [None, *self.session.snap.group_levels]
        i = levels.index(self.session.settings.group)
        self._apply(self._with(group=levels[(i + 1) % len(levels)]))

    def action_clear_filters(self) -> None:
        self._apply(ListSettings(sort=self.session.settings.sort))

    def _with(self, **changes: object) -> ListSettings:
        from dataclasses import replace

        return replace(self.session.settings, **changes)  # type: ignore[arg-type]

    # ------------------------------------------------------------------ ledger refresh

    def action_refresh(self) -> None:
        self._read_ledger()

    @work(thread=True, exclusive=True, group="ledger-read")
    def _read_ledger(self) -> None:
        self.session.refresh_reviews()
        self.app.call_from_thread(self._after_ledger)

    def on_screen_resume(self) -> None:
        """Back from a case or a dialog: its claim is released, so stop counting it now."""
        if self._forget_released():
            self.query_one(CaseList).refresh()
            self._show_counts()

    def _forget_released(self) -> bool:
        """Drop this screen's claims on cases no screen of this app has open any more (their
        release may still be on its way to the ledger when a read returns)."""
        open_cases = [str(getattr(s, "case_id", "")) for s in self.app.screen_stack]
        return self.session.forget_released_claims(open_cases)

    def _after_ledger(self) -> None:
        self._forget_released()
        if self.session.settings.unreviewed:
            self._apply(self.session.settings, keep_place=True)
        else:
            self.query_one(CaseList).refresh()
            self._show_counts()

    def recorded(self, entry: Entry) -> None:
        """A decision was recorded (here or on the case screen): show it, read states again."""
        case = safe_text(entry.case_id)
        self.say(f"recorded entry {entry.seq} for {case} · hash {entry.hash[:16]}…")
        self._read_ledger()

    # ------------------------------------------------------------------ cases

    @on(CaseList.Chosen)
    def _chosen(self, event: CaseList.Chosen) -> None:
        self.open_row(event.row)

    def action_open_case(self) -> None:
        row = self.query_one(CaseList).current_row
        if row is not None:
            self.open_row(row)

    def open_row(self, row: int) -> None:
        from closecall.tui.case_screen import CaseScreen

        self._remember(row)
        self.app.push_screen(CaseScreen(self.session, row, self.neighbour))

    def _remember(self, row: int) -> None:
        pos = self.session.position_of_row(row)
        if pos >= 0:
            self._last_position[row] = pos

    def neighbour(self, row: int, step: int) -> int | None:
        """The row ``step`` places after ``row`` in the current list (None past either end).

        A case that has left the list (decided, with "unreviewed only" on) is followed by
        the case that took its place.
        """
        cases = self.query_one(CaseList)
        pos = self.session.position_of_row(row)
        if pos >= 0:
            target_pos = pos + step
        elif row in self._last_position:
            target_pos = self._last_position[row] + (0 if step > 0 else -1)
        else:
            return None
        target = cases.row_at(target_pos)
        if target is not None:
            cases.go_to(target_pos)
            self._remember(target)
        return target

    def action_decide(self) -> None:
        row = self.query_one(CaseList).current_row
        if row is None:
            return
        from closecall.tui.decision_dialog import DecisionDialog

        if not may_decide(self):
            return
        case_id = str(self.session.snap.case_ids[row])
        self.app.push_screen(DecisionDialog(self.session, case_id), self._decided)

    def _decided(self, entry: Entry | None) -> None:
        if entry is not None:
            self.recorded(entry)
        else:
            self._read_ledger()  # a note closed unrecorded is a draft: count it

    # ------------------------------------------------------------------ id search

    def action_search(self) -> None:
        row = self.query_one("#search-row")
        row.display = True
        self._search_from = self.query_one(CaseList).cursor
        search = self.query_one("#search", Input)
        search.value = ""
        search.focus()

    @on(Input.Changed, "#search")
    def _search_changed(self, event: Input.Changed) -> None:
        prefix = event.value.strip()
        if not prefix:
            return
        pos, matches = self.session.find(prefix)
        if pos is not None:
            self.query_one(CaseList).go_to(pos)
            self.say(f"{matches:,} ids start with {prefix!r}")
        elif matches:
            self.say(f"{prefix!r}: {matches:,} in the study, none listed here; ⏎ opens the first")
        else:
            self.say(f"no case id starts with {prefix!r}")

    @on(Input.Submitted, "#search")
    def _search_done(self, event: Input.Submitted) -> None:
        prefix = event.value.strip()
        self._close_search()
        if not prefix:
            return
        pos, _ = self.session.find(prefix)
        if pos is None:
            rows = self.session.rows_with_prefix(prefix)
            if len(rows):
                self.open_row(int(rows[0]))

    def _close_search(self) -> None:
        self.query_one("#search-row").display = False
        self.query_one(CaseList).focus()

    def action_cancel_search(self) -> None:
        if self.query_one("#search-row").display:
            cases = self.query_one(CaseList)
            if self._search_from is not None:
                cases.go_to(self._search_from)
            self._close_search()
            self.say("")


#: The orders and the flips switch in the switch row's words.
SORT_WORDS = {"triage": "triage", "closeness": "flips first", "ambiguity": "ambiguity",
              "dependence": "dependence"}  # fmt: skip
FLIP_WORDS = {"any": "any", "model": "model", "lens": "lens-only"}


def _count_lines(c: dict[str, int], band: str, width: int) -> list[Text]:
    """The header's counts in three parts (listed; within the band and flips; reviewed,
    claimed and drafts) on one line, or broken between parts where ``width`` is too short
    (national-scale numbers, a drafts count at 80 columns): never cut."""
    listed = Text(no_wrap=True, overflow="ellipsis")
    listed.append(f"{c.get('listed', 0):,}", "bold")
    listed.append(f" listed of {c.get('cases', 0):,}")
    near = Text(f"{c.get('within_band', 0):,} within {band} · {c.get('flips', 0):,} flips")
    mine = Text(f"{c.get('reviewed', 0):,} reviewed · {c.get('claimed', 0):,} claimed")
    if c.get("drafts"):
        mine.append(f" · {c['drafts']:,} draft{'s' if c['drafts'] != 1 else ''}", "bold")
    lines = [listed]
    for part in (near, mine):
        if len(lines[-1].plain) + 3 + len(part.plain) > width:
            lines.append(Text(no_wrap=True, overflow="ellipsis"))
        else:
            lines[-1].append(" │ ")
        lines[-1].append_text(part)
    return lines


def _packed(parts: list[tuple[str, str]], width: int, gap: str, lead: str = "") -> list[Text]:
    """Items (text, style) on as few lines of ``width`` as they fit, never split; ``lead``
    (bold) starts the first line."""
    lines: list[Text] = [Text(lead, "bold", no_wrap=True, overflow="ellipsis")]
    for text, style in parts:
        line = lines[-1]
        started = line.plain not in ("", lead)
        need = len(text) + (len(gap) if started else 0)
        if started and len(line.plain) + need > width:
            line = Text(no_wrap=True, overflow="ellipsis")
            lines.append(line)
            started = False
        if started:
            line.append(gap)
        line.append(text, style)
    return lines


def _cut(text: str, width: int) -> str:
    """``text`` in at most ``width`` cells (at least 8), with ``…`` when cut (a very long label
    keeps the rest of the switch row readable)."""
    width = max(8, width)
    return text if len(text) <= width else text[: width - 1] + "…"
