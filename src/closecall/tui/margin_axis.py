"""Every model's margin for one case on one axis centred at the threshold, each with its band.

The axis is in log-odds under the operative (first) cost lens: ``┃`` is its threshold. Another
lens only moves the threshold, so it is drawn as a tick ``╎`` at its own threshold, with its
letter on the scale line; a model whose ``●`` lies between two thresholds is decided
differently by those lenses. ``━`` is the band of equally good models; ``◂``/``▸`` mark a value
beyond the drawn range.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import ClassVar

from rich.style import Style
from rich.text import Text
from textual.widget import Widget

from closecall.core.text import signed
from closecall.core.vocabulary import short_model
from closecall.tui.ascii_mode import plus_minus
from closecall.tui.marks import REFERENCE

NAME_WIDTH = 10


@dataclass(frozen=True)
class AxisLine:
    name: str
    margin: float  # under the operative lens
    half: float | None  # equally-good half-width (None: no band, e.g. imported scores)
    favourable: list[bool]  # decision under each lens
    reference: bool = False


@dataclass(frozen=True)
class AxisData:
    lines: list[AxisLine]
    lens_names: list[str]
    lens_offsets: list[float]  # each lens's threshold on the operative lens's axis
    lens_letters: list[str] = field(default_factory=list)

    def span(self) -> float:
        """Half-range of the axis: everything fits, rounded up to a half log-odds."""
        reach = [abs(o) for o in self.lens_offsets]
        for line in self.lines:
            if math.isfinite(line.margin):
                reach.append(abs(line.margin) + (line.half or 0.0))
        top = max([1.0, *reach])
        return min(8.0, math.ceil(top * 2 + 1e-9) / 2)


def lens_letters(names: list[str]) -> list[str]:
    """One distinct lower-case letter per lens (its initial when free)."""
    used: set[str] = set()
    out: list[str] = []
    for name in names:
        pool = [c.lower() for c in name if c.isalpha()] + [chr(c) for c in range(97, 123)]
        letter = next(c for c in pool if c not in used)
        used.add(letter)
        out.append(letter)
    return out


class MarginAxis(Widget):
    """Draws an :class:`AxisData`."""

    COMPONENT_CLASSES: ClassVar[set[str]] = {
        "margin-axis--fav",
        "margin-axis--unfav",
        "margin-axis--band",
        "margin-axis--threshold",
        "margin-axis--muted",
    }

    def __init__(self, data: AxisData, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.data = data

    def update_data(self, data: AxisData) -> None:
        self.data = data
        self.styles.height = len(data.lines) + 3
        self.refresh()

    def on_mount(self) -> None:
        self.styles.height = len(self.data.lines) + 3

    def _style(self, name: str) -> Style:
        return self.get_component_rich_style(f"margin-axis--{name}", partial=True)

    def render(self) -> Text:
        d = self.data
        letters = d.lens_letters or lens_letters(d.lens_names)
        width = self.size.width or 80
        pm = plus_minus(self.app)  # "+/-" in ASCII mode: the band column is 2 cells wider
        band_w = 4 + len(pm)
        right = 9 + band_w + 2 * len(d.lens_names)
        # every model's name whole (a cut name is a different word), the axis gives way
        name_w = max([NAME_WIDTH, *(len(short_model(line.name)) + 2 for line in d.lines)])
        cells = max(15, width - name_w - right - 1)
        cells -= 1 - cells % 2  # odd: the threshold gets the middle cell
        span = d.span()
        mid = cells // 2

        def pos(v: float) -> int:
            return round((v + span) / (2 * span) * (cells - 1))

        ticks = {pos(o): letters[k] for k, o in enumerate(d.lens_offsets) if k and abs(o) <= span}
        text = Text(no_wrap=True, overflow="crop")
        header = f"{'':<{name_w}}{'':<{cells}} {'margin':>6} {'band':>{band_w}}  "
        text.append(header + " ".join(letters) + "\n", self._style("muted"))
        for line in d.lines:
            name = (REFERENCE if line.reference else " ") + short_model(line.name)
            text.append(f"{name:<{name_w}}")
            row = ["·"] * cells
            styles: list[str | None] = [None] * cells
            for p in ticks:
                row[p], styles[p] = "╎", "threshold"
            row[mid], styles[mid] = "┃", "threshold"
            if line.half is not None and math.isfinite(line.margin):
                lo, hi = line.margin - line.half, line.margin + line.half
                for p in range(max(0, pos(lo)), min(cells - 1, pos(hi)) + 1):
                    row[p] = "╋" if p == mid else "━"
                    styles[p] = "band"
            if math.isfinite(line.margin):
                if line.margin < -span:
                    row[0] = "◂"
                elif line.margin > span:
                    row[-1] = "▸"
                else:
                    row[pos(line.margin)] = "●"
                    styles[pos(line.margin)] = "fav" if line.margin > 0 else "unfav"
            for ch, st in zip(row, styles, strict=True):
                text.append(ch, self._style(st) if st else None)
            band = "—".center(band_w) if line.half is None else f"{pm}{line.half:.2f}"[:band_w]
            tone = self._style("fav" if line.margin > 0 else "unfav")
            text.append(f" {signed(line.margin):>6}", tone)
            text.append(f" {band:>{band_w}}  ")
            text.append(" ".join("+" if f else "−" for f in line.favourable) + "\n")
        text.append(" " * name_w)
        text.append(self._scale(cells, span, ticks), self._style("muted"))
        text.append("  log-odds\n", self._style("muted"))
        legend = (
            f"┃ threshold ({d.lens_names[0]})"
            + "".join(f"  ╎{letters[k]} {n}" for k, n in enumerate(d.lens_names) if k)
            + "  ━ band  ● margin  "
            + " ".join(letters)
            + ": + fav − unfav"
        )
        text.append(legend, self._style("muted"))
        return text

    @staticmethod
    def _scale(cells: int, span: float, ticks: dict[int, str]) -> str:
        row = [" "] * cells
        for p, letter in ticks.items():
            row[p] = letter

        def put(p: int, label: str) -> None:
            start = max(0, min(cells - len(label), p - len(label) // 2))
            if all(c == " " for c in row[max(0, start - 1) : start + len(label) + 1]):
                row[start : start + len(label)] = list(label)

        put(cells // 2, "0")
        put(0, f"−{span:g}")
        put(cells - 1, f"+{span:g}")
        put(round((cells - 1) / 4), f"−{span / 2:g}")
        put(round(3 * (cells - 1) / 4), f"+{span / 2:g}")
        return "".join(row)
