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
from closecall.core.vocabulary import (
    OPEN,
    TO_FAVOURABLE,
    TO_UNFAVOURABLE,
    UPHELD,
    model_letters,
    short_model,
)
from closecall.tui.marks import (
    AGREE,
    AMBIGUOUS,
    CLAIM_MINE,
    CLAIM_OTHER,
    CURSOR,
    REFERENCE,
    STATE_WORD,
    band_glyph,
)
from closecall.tui.session import ReviewSession

STATE_WIDTH = 10
BAND_SPAN = 2.0  # the band column's little axis covers ±2 log-odds


@dataclass(frozen=True)
class Layout:
    """Column widths for one list width."""

    rank: int
    case: int
    group: int
    marks: int
    extra_models: list[str]

    @classmethod
    def fit(cls, session: ReviewSession, width: int, listed: int) -> Layout:
        snap = session.snap
        rank = max(3, len(f"{listed:,}"))
        case = min(16, max(4, snap.case_ids.dtype.itemsize // 4 or 10))
        group = min(8, max(5, *(len(safe_text(g)) for g in snap.group_levels)))
        n_lenses = len(snap.lenses)
        marks = len(snap.model_names) * n_lenses + n_lenses - 1
        base = 2 + rank + 1 + case + 1 + group + 1 + 6 + 1 + 10 + 1 + marks + 1 + 4 + 1 + 10
        extra: list[str] = []
        room = width - 1 - base
        for m in snap.model_names:
            if m == snap.reference or room < 9:
                continue
            extra.append(m)
            room -= 9
        return cls(rank, case, group, max(marks, 7), extra)


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
        self.letters = model_letters(session.snap.model_names)
        self._order: np.ndarray = np.zeros(0, dtype=np.int64)
        self._layout: Layout | None = None

    # ------------------------------------------------------------------ data

    def reload(self, keep_row: int | None = None) -> None:
        """Take the session's current queue; keep the cursor on ``keep_row`` if still listed."""
        q = self.session.queue
        self._order = q.order if q is not None else np.zeros(0, dtype=np.int64)
        self._layout = None
        self.virtual_size = Size(self.size.width, len(self._order) + 1)
        target = 0
        if keep_row is not None:
            pos = self.session.position_of_row(keep_row)
            target = pos if pos >= 0 else min(self.cursor, max(0, len(self._order) - 1))
        self.cursor = min(target, max(0, len(self._order) - 1))
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
        snap = self.session.snap
        marks = " ".join("".join(self.letters[m] for m in snap.model_names) for _ in snap.lenses)
        text = (
            f"  {'#':>{lay.rank}} {'case':<{lay.case}} {'group':<{lay.group}} "
            f"{'margin':>6} {'band':<10} {marks:<{lay.marks}} {'dep':>4} {'state':<10}"
        )
        for m in lay.extra_models:
            text += f"{short_model(m)[:8]:>9}"
        style = self._style("case-list--header", base)
        return Strip([Segment(text, style)]).adjust_cell_length(width, style)

    def _row(self, position: int, width: int, base: Style) -> Strip:
        session = self.session
        snap = session.snap
        q = session.queue
        assert q is not None
        lay = self.layout_for(width)
        r = int(self._order[position])
        is_cursor = position == self.cursor
        row_base = self._style("case-list--cursor", base) if is_cursor else base
        muted = self._style("case-list--muted", row_base)
        margin = float(q.margin[r])
        case_id = str(snap.case_ids[r])
        group = safe_text(str(snap.group_labels[r])) if len(snap.group_levels) else ""
        tone = self._style("case-list--fav" if margin > 0 else "case-list--unfav", row_base)

        segs: list[Segment] = [
            Segment(f"{CURSOR if is_cursor else ' '} ", row_base),
            Segment(f"{position + 1:>{lay.rank},} ", muted),
            Segment(f"{_fit(safe_text(case_id), lay.case):<{lay.case}} ", row_base),
            Segment(f"{_fit(group, lay.group):<{lay.group}} ", row_base),
            Segment(f"{signed(margin):>6} ", tone),
        ]
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
        flag = self._style("case-list--flag", row_base)
        segs.append(Segment(f"{self._marks(r):<{lay.marks}} ", flag))
        dep = session.peek("dependence")
        waiting = "…" if not session.measures_ready else "—"
        segs.append(Segment(f"{percent(float(dep[r])) if dep is not None else waiting:>4} ", muted))
        state = self._state(r, case_id)
        segs.append(Segment(f"{state:<{STATE_WIDTH}}", self._state_style(r, row_base)))
        for m in lay.extra_models:
            value = float(snap.logit(m)[r]) - (float(snap.logit(snap.reference)[r]) - margin)
            segs.append(Segment(f"{signed(value):>9}", muted))
        return Strip(segs).adjust_cell_length(width, row_base)

    def _marks(self, r: int) -> str:
        q = self.session.queue
        assert q is not None
        grid = q.grid
        fav = grid.favourable[r]
        ref = fav[grid.reference_col]
        snap = self.session.snap
        per_lens: dict[str, list[str]] = {lens.name: [] for lens in snap.lenses}
        for col, (model, lens) in enumerate(grid.pairs):
            if col == grid.reference_col:
                ch = REFERENCE
            elif fav[col] != ref:
                ch = self.letters[model]
            else:
                ch = AGREE
            per_lens[lens].append(ch)
        return " ".join("".join(per_lens[lens.name]) for lens in snap.lenses)

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
