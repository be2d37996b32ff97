"""The case list: a Line-API scroll view that draws only the visible rows of the queue.

Nothing per case is built ahead: each visible line is formatted from the NumPy arrays when it
is drawn, so the list costs the same at a thousand cases as at 850,000. Line 0 is the column
header (it stays put); the rows follow.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from rich.segment import Segment
from rich.style import Style
from textual import events
from textual.binding import Binding, BindingType
from textual.geometry import Size
from textual.message import Message
from textual.reactive import reactive
from textual.scroll_view import ScrollView
from textual.strip import Strip

from closecall.core.text import percent, safe_text, signed
from closecall.core.vocabulary import OPEN, TO_FAVOURABLE, TO_UNFAVOURABLE, UPHELD, short_model
from closecall.review.triage import CLOSENESS_WORDS, PROXIES_WORD, TIER_WORDS, TIERS
from closecall.tui.marks import (
    AMBIGUOUS,
    CLAIM_MINE,
    CLAIM_OTHER,
    CURSOR,
    STATE_WORD,
    band_glyph,
)
from closecall.tui.session import ReviewSession

STATE_WIDTH = 9
BAND_SPAN = 2.0  # the band column's little axis covers ±2 log-odds
DISTANCE_WIDTH = max(len(w) for w in CLOSENESS_WORDS)  # "on the line", "well above"…
WHY_WIDTH = max(len(w) for w in (*TIER_WORDS, PROXIES_WORD))
DIFFERS_MIN = 15  # the "decided otherwise by" column never gets narrower
DIFFERS_HEADER = "decided otherwise by"


@dataclass(frozen=True)
class Layout:
    """Column widths for one list width: the words first, then what room allows.

    Always: cursor, place, case, group level (the header names the attribute), distance in
    words, why the case is listed, who decides otherwise, state. Wider terminals add, in this
    order, the margin in log-odds, the band axis, the dependence share and the other models'
    margins.
    """

    rank: int
    case: int
    group: int
    differs: int
    margin: bool
    band: bool
    dep: bool
    extra_models: list[str]

    @classmethod
    def fit(cls, session: ReviewSession, width: int, listed: int) -> Layout:
        snap = session.snap
        rank = max(3, len(f"{listed:,}"))
        case = min(16, max(4, snap.case_ids.dtype.itemsize // 4 or 10))
        labels = [len(safe_text(g)) for g in snap.group_levels]
        group = min(12, max(5, len(session.group_attribute), *labels))
        fixed = 2 + rank + 1 + case + 1 + group + 1 + DISTANCE_WIDTH + 1 + WHY_WIDTH + 1
        fixed += STATE_WIDTH
        room = width - 1 - fixed - DIFFERS_MIN - 1
        wanted = 26  # the names of two or three models fit in this many cells
        extra_room = max(0, room - (wanted - DIFFERS_MIN))
        margin = band = dep = False
        if extra_room >= 7:
            margin, extra_room = True, extra_room - 7
        if extra_room >= 11:
            band, extra_room = True, extra_room - 11
        if extra_room >= 5:
            dep, extra_room = True, extra_room - 5
        same = session.queue.same_as if session.queue is not None else {}
        extra: list[str] = []
        for m in snap.model_names:
            if m == snap.reference or m in same or extra_room < 11:
                continue
            extra.append(m)
            extra_room -= 11
        used = 7 * margin + 11 * band + 5 * dep + 11 * len(extra)
        differs = max(DIFFERS_MIN, width - 1 - fixed - used - 1)
        return cls(rank, case, group, differs, margin, band, dep, extra)


class CaseList(ScrollView, can_focus=True):
    """The queue's cases, one per line; the cursor row is marked with ▶."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("down,j", "move(1)", "down", show=False),
        Binding("up,k", "move(-1)", "up", show=False),
        Binding("pagedown,space", "page(1)", "page down", show=False),
        Binding("pageup,b", "page(-1)", "page up", show=False),
        Binding("home", "jump(0)", "first", show=False),
        Binding("end", "jump(-1)", "last", show=False),
        Binding("enter", "choose", "open case", show=False),
    ]

    COMPONENT_CLASSES: ClassVar[set[str]] = {
        "case-list--header",
        "case-list--cursor",
        "case-list--fav",
        "case-list--unfav",
        "case-list--muted",
        "case-list--done",
        "case-list--flag",
    }

    cursor: reactive[int] = reactive(0, always_update=True, repaint=False)

    class Chosen(Message):
        """Enter on a row: open that case."""

        def __init__(self, row: int) -> None:
            super().__init__()
            self.row = row

    class Moved(Message):
        """The cursor moved to another row."""

        def __init__(self, row: int | None) -> None:
            super().__init__()
            self.row = row

    def __init__(self, session: ReviewSession, id: str | None = None) -> None:
        super().__init__(id=id)
        self.session = session
        self._order: np.ndarray = np.zeros(0, dtype=np.int64)
        self._near: np.ndarray = np.zeros(0, dtype=np.int8)  # distance code per case
        self._layout: Layout | None = None

    # ------------------------------------------------------------------ data

    def reload(self, keep_row: int | None = None) -> None:
        """Take the session's current queue; keep the cursor on ``keep_row`` if still listed
        (None: the cursor goes to the top, as after a change of filter or order)."""
        answer = self.session.answer
        self._order = answer.queue.order if answer is not None else np.zeros(0, dtype=np.int64)
        self._near = answer.closeness_codes() if answer is not None else np.zeros(0, dtype=np.int8)
        self._layout = None
        self.virtual_size = Size(self.size.width, len(self._order) + 1)
        target = 0
        if keep_row is not None:
            pos = self.session.position_of_row(keep_row)
            target = pos if pos >= 0 else min(self.cursor, max(0, len(self._order) - 1))
        self.cursor = min(target, max(0, len(self._order) - 1))
        if keep_row is None:
            self.scroll_to(y=0, animate=False, immediate=True)
        else:
            self._scroll_to_cursor(center=True)
        self.refresh()

    @property
    def count(self) -> int:
        return len(self._order)

    @property
    def current_row(self) -> int | None:
        """The snapshot row under the cursor (None when the list is empty)."""
        if not len(self._order):
            return None
        return int(self._order[min(self.cursor, len(self._order) - 1)])

    def row_at(self, position: int) -> int | None:
        if 0 <= position < len(self._order):
            return int(self._order[position])
        return None

    # ------------------------------------------------------------------ movement

    def watch_cursor(self, old: int, new: int) -> None:
        self._scroll_to_cursor()
        self.refresh_line(old + 1)
        self.refresh_line(new + 1)
        self.post_message(self.Moved(self.current_row))

    def _scroll_to_cursor(self, center: bool = False) -> None:
        """Keep the cursor row in view (in the middle of the view when ``center``)."""
        if not self.count:
            return
        height = max(1, self.size.height - 1)  # the header line sits over the rows
        top = int(self.scroll_offset.y)
        if center:
            self.scroll_to(y=max(0, self.cursor - height // 2), animate=False, immediate=True)
        elif self.cursor < top:
            self.scroll_to(y=self.cursor, animate=False, immediate=True)
        elif self.cursor >= top + height:
            self.scroll_to(y=self.cursor - height + 1, animate=False, immediate=True)

    def action_move(self, step: int) -> None:
        if self.count:
            self.cursor = max(0, min(self.count - 1, self.cursor + step))

    def action_page(self, direction: int) -> None:
        self.action_move(direction * max(1, self.size.height - 2))

    def action_jump(self, position: int) -> None:
        if self.count:
            self.cursor = position if position >= 0 else self.count - 1

    def action_choose(self) -> None:
        row = self.current_row
        if row is not None:
            self.post_message(self.Chosen(row))

    def go_to(self, position: int) -> None:
        if self.count:
            self.cursor = max(0, min(self.count - 1, position))
            self._scroll_to_cursor(center=True)

    def on_click(self, event: events.Click) -> None:
        position = int(self.scroll_offset.y) + event.y - 1
        if 0 <= position < self.count:
            if position == self.cursor and event.chain > 1:
                self.action_choose()
            self.cursor = position

    def on_resize(self, event: events.Resize) -> None:
        self._layout = None
        self.virtual_size = Size(event.size.width, len(self._order) + 1)

    # ------------------------------------------------------------------ drawing

    def layout_for(self, width: int) -> Layout:
        if self._layout is None:
            self._layout = Layout.fit(self.session, width, max(1, self.count))
        return self._layout

    def render_line(self, y: int) -> Strip:
        width = self.size.width
        base = self.rich_style
        if y == 0:
            return self._header(width, base)
        position = int(self.scroll_offset.y) + y - 1
        if position >= self.count:
            return Strip.blank(width, base)
        return self._row(position, width, base)

    def _style(self, name: str, base: Style) -> Style:
        return base + self.get_component_rich_style(name, partial=True)

    def _header(self, width: int, base: Style) -> Strip:
        lay = self.layout_for(width)
        attribute = _fit(safe_text(self.session.group_attribute), lay.group)
        differs = DIFFERS_HEADER if lay.differs >= len(DIFFERS_HEADER) else "who differs"
        text = (
            f"  {'#':>{lay.rank}} {'case':<{lay.case}} {attribute:<{lay.group}} "
            f"{'distance':<{DISTANCE_WIDTH}} {'why first':<{WHY_WIDTH}} "
            f"{differs:<{lay.differs}} "
        )
        if lay.margin:
            text += f"{'margin':>6} "
        if lay.band:
            text += f"{'band':<10} "
        if lay.dep:
            text += f"{'dep':>4} "
        text += f"{'state':<{STATE_WIDTH}}"
        for m in lay.extra_models:
            text += f"{_fit(short_model(m), 10):>11}"
        style = self._style("case-list--header", base)
        return Strip([Segment(text, style)]).adjust_cell_length(width, style)

    def _row(self, position: int, width: int, base: Style) -> Strip:
        session = self.session
        snap = session.snap
        answer = session.answer
        assert answer is not None
        q = answer.queue
        lay = self.layout_for(width)
        r = int(self._order[position])
        is_cursor = position == self.cursor
        row_base = self._style("case-list--cursor", base) if is_cursor else base
        muted = self._style("case-list--muted", row_base)
        margin = float(q.margin[r])
        case_id = str(snap.case_ids[r])
        group = safe_text(str(snap.group_labels[r])) if len(snap.group_levels) else ""
        tone = self._style("case-list--fav" if margin > 0 else "case-list--unfav", row_base)
        flag = self._style("case-list--flag", row_base)

        segs: list[Segment] = [
            Segment(f"{CURSOR if is_cursor else ' '} ", row_base),
            Segment(f"{position + 1:>{lay.rank},} ", muted),
            Segment(f"{_fit(safe_text(case_id), lay.case):<{lay.case}} ", row_base),
            Segment(f"{_fit(group, lay.group):<{lay.group}} ", row_base),
            Segment(f"{CLOSENESS_WORDS[int(self._near[r])]:<{DISTANCE_WIDTH}} ", tone),
            Segment(f"{self._why(r):<{WHY_WIDTH}} ", flag),
            Segment(f"{_names(answer.others_differ(r), lay.differs)} ", row_base),
        ]
        if lay.margin:
            segs.append(Segment(f"{signed(margin):>6} ", tone))
        if lay.band:
            limits = session.band_limits(compute=False)
            if limits is not None:
                lo, hi = float(limits[0][r]), float(limits[1][r])
            else:
                lo = hi = math.nan
            glyph = band_glyph(margin, lo, hi, span=BAND_SPAN)
            if not session.measures_ready:
                glyph = f"{'…':^9}"
            ambiguous = session.peek_mask("ambiguous")
            amb = AMBIGUOUS if ambiguous is not None and ambiguous[r] else " "
            segs.append(Segment(f"{glyph}{amb} ", row_base))
        if lay.dep:
            dep = session.peek("dependence")
            waiting = "…" if not session.measures_ready else "—"
            value = percent(float(dep[r])) if dep is not None else waiting
            segs.append(Segment(f"{value:>4} ", muted))
        state = self._state(r, case_id)
        segs.append(Segment(f"{state:<{STATE_WIDTH}}", self._state_style(r, row_base)))
        for m in lay.extra_models:
            other = float(snap.logit(m)[r]) - (float(snap.logit(snap.reference)[r]) - margin)
            segs.append(Segment(f"{signed(other):>11}", muted))
        return Strip(segs).adjust_cell_length(width, row_base)

    def _why(self, r: int) -> str:
        """The row's triage reason in words (the queue's tier)."""
        q = self.session.queue
        assert q is not None
        tier = int(q.tier[r]) if q.tier is not None else len(TIERS) - 1
        if tier == 0 and q.rests_group is not None and not q.rests_group[r]:
            return PROXIES_WORD
        return TIER_WORDS[tier]

    def _state(self, r: int, case_id: str) -> str:
        code = int(self.session.states[r])
        if code != OPEN:
            return STATE_WORD[code]
        others = self.session.claimed_by_others(case_id)
        if others:
            return _fit(f"{CLAIM_OTHER} {others[0]}", STATE_WIDTH)
        if self.session.claimed_by_me(case_id):
            return f"{CLAIM_MINE} you"
        return STATE_WORD[OPEN]

    def _state_style(self, r: int, base: Style) -> Style:
        code = int(self.session.states[r])
        if code in (UPHELD, TO_FAVOURABLE, TO_UNFAVOURABLE):
            return self._style("case-list--done", base)
        return base


def _fit(text: str, width: int) -> str:
    return text if len(text) <= width else text[: width - 1] + "…"


def _names(names: list[str], width: int) -> str:
    """Whole names, comma-separated, as many as fit in ``width``; ``+N`` for the rest.

    A name is never cut: the case screen lists every model and lens that decides otherwise.
    """
    if not names:
        return f"{'—':<{width}}"
    for shown in range(len(names), 0, -1):
        rest = len(names) - shown
        for more in (f" +{rest} more", f" +{rest}") if rest else ("",):
            text = ", ".join(names[:shown]) + more
            if len(text) <= width:
                return f"{text:<{width}}"
    return f"{_fit(f'{len(names)} of them', width):<{width}}"
