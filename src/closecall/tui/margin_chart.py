"""Where each group's cases sit near the threshold: one line of block characters per group.

Each group's line is scaled to its own tallest bin, so the shapes compare across groups of any
size; the words on the right say how many of the group's cases lie within the review band.
The axis line below marks the band with ``[`` and ``]`` and the threshold with ``0``. Under the
list's filters it counts the cases they keep, at any distance from the threshold, and its axis
says "filtered"; a group they leave out is said so.
"""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual.widget import Widget

from closecall.core.text import safe_text, share_of, sparkline
from closecall.tui.session import GroupChart, ReviewSession

MAX_GROUPS = 4
MAX_BINS = 64


class MarginChart(Widget):
    """The per-group distribution of reference margins around the threshold."""

    COMPONENT_CLASSES: ClassVar[set[str]] = {"margin-chart--band", "margin-chart--axis"}

    def __init__(self, session: ReviewSession, id: str | None = None) -> None:
        super().__init__(id=id)
        self.session = session
        self._cache: dict[int, GroupChart] = {}
        self._rows: object = None  # the session's chart rows the cache counts

    def lines_needed(self) -> int:
        return min(MAX_GROUPS, len(self.session.snap.group_levels)) + 1

    def chart(self, bins: int) -> GroupChart:
        if self._rows is not self.session.chart_rows:  # the list's filters changed
            self._cache, self._rows = {}, self.session.chart_rows
        if bins not in self._cache:
            self._cache[bins] = self.session.group_chart(bins)
        return self._cache[bins]

    def render(self) -> Text:
        width = self.size.width or 80
        levels = [safe_text(g) for g in self.session.snap.group_levels[:MAX_GROUPS]]
        label_w = min(8, max(len(g) for g in levels)) + 1 if levels else 6
        right_w = 22
        bins = max(10, min(MAX_BINS, width - label_w - right_w - 1))
        bins -= bins % 2
        chart = self.chart(bins)
        band_style = self.get_component_rich_style("margin-chart--band", partial=True)
        axis_style = self.get_component_rich_style("margin-chart--axis", partial=True)
        half = bins // 2
        cell = 2 * chart.span / bins
        in_band = [abs(-chart.span + (i + 0.5) * cell) <= chart.band for i in range(bins)]
        text = Text(no_wrap=True, overflow="crop")
        for g, level in enumerate(levels):
            counts = chart.counts[g]
            bars = sparkline(counts.tolist(), float(counts.max()))
            text.append(f"{level[: label_w - 1]:<{label_w}}")
            within, total = int(chart.within_band[g]), int(chart.totals[g])
            if chart.filtered and not total:
                text.append(" " * half + "│", axis_style)
                text.append(" left out by the filters\n", "dim")
                continue
            for i, ch in enumerate(bars):
                if i == half:
                    text.append("│", axis_style)
                text.append(ch, band_style if in_band[i] else None)
            text.append(f" {within:>7,} in band {share_of(within, total):>4}\n")
        text.append(" " * label_w)
        text.append(self._axis(bins, chart), axis_style)
        text.append("  log-odds, filtered" if chart.filtered else "  log-odds")
        return text

    @staticmethod
    def _axis(bins: int, chart: GroupChart) -> str:
        """``−1.5   [−0.5  0  +0.5]   +1.5`` laid over bins + 1 cells (the divider)."""
        cells = [" "] * (bins + 1)
        half = bins // 2
        cells[half] = "0"

        def at(value: float) -> int:
            i = round((value + chart.span) / (2 * chart.span) * bins)
            return i if i < half else i + (1 if value > 0 else 0)

        def put(pos: int, label: str, right: bool = False) -> None:
            start = pos - len(label) + 1 if right else pos
            if start < 0 or start + len(label) > len(cells):
                return
            if any(c != " " for c in cells[start : start + len(label)]):
                return
            cells[start : start + len(label)] = list(label)

        if 0 < chart.band < chart.span:
            lo, hi = at(-chart.band), min(at(chart.band), bins)
            cells[max(0, lo)] = "["
            cells[hi] = "]"
            put(max(0, lo) + 1, f"−{chart.band:g}")
            put(hi - 1, f"+{chart.band:g}", right=True)
        put(0, f"−{chart.span:g}")
        put(bins, f"+{chart.span:g}", right=True)
        return "".join(cells)
