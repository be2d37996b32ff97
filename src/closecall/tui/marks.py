"""The review screens' marks and short words: each meaning has a sign or a word, not colour alone.

All glyphs here are one terminal cell wide (box drawing, geometric shapes, arrows), so columns
line up in any UTF-8 terminal, with or without colour.
"""

from __future__ import annotations

import math

from closecall.core.vocabulary import (
    CONFLICT,
    DEFERRED,
    OPEN,
    TO_FAVOURABLE,
    TO_UNFAVOURABLE,
    UPHELD,
)

# --------------------------------------------------------------------------- review states

#: Short state words for the case list (at most 9 cells).
STATE_WORD = {
    OPEN: "open",
    UPHELD: "✓ upheld",
    TO_FAVOURABLE: "✓ →fav",
    TO_UNFAVOURABLE: "✓ →unfav",
    DEFERRED: "… later",
    CONFLICT: "!conflict",  # reviewers' decisions in force disagree
}
#: Longer words for the case and ledger screens.
ACTION_WORD = {
    "uphold": "upheld the model",
    "override-favourable": "overrode → favourable",
    "override-unfavourable": "overrode → unfavourable",
    "defer": "deferred (decide later)",
}
ACTION_SHORT = {
    "uphold": "= upheld",
    "override-favourable": "▲ →fav",
    "override-unfavourable": "▼ →unfav",
    "defer": "… later",
}
CLAIM_OTHER = "◇"  # someone else has the case open
CLAIM_MINE = "◆"  # you have it open

# --------------------------------------------------------------------------- decisions

FAV, UNFAV = "fav", "unfav"
AGREE = "·"  # a model/lens that decides as the reference does
REFERENCE = "*"  # the reference model under the operative lens
CURSOR = "▶"
AMBIGUOUS = "≈"  # the band of equally good models straddles the threshold


# --------------------------------------------------------------------------- glyph axes


def band_glyph(margin: float, lo: float, hi: float, span: float, width: int = 9) -> str:
    """A tiny axis of ``width`` cells over [−span, +span], threshold in the middle cell.

    ``┼`` is the threshold, ``━`` the band of equally good margins, ``●`` the margin itself;
    ``┿`` when the band covers the threshold; ``◂``/``▸`` when something lies off the axis.
    Without a band (NaN) only the margin and the threshold are drawn.
    """
    cells = ["·"] * width
    mid = width // 2
    cell = 2 * span / width

    def pos(v: float) -> int:
        return min(width - 1, max(0, math.floor((v + span) / cell)))

    if math.isfinite(lo) and math.isfinite(hi):
        for i in range(pos(lo), pos(hi) + 1):
            cells[i] = "━"
        straddles = lo <= 0 <= hi
    else:
        straddles = False
    cells[mid] = "┿" if straddles else ("┼" if cells[mid] == "·" else cells[mid])
    if math.isfinite(margin):
        cells[pos(margin)] = "●"
        if margin < -span:
            cells[0] = "◂"
        elif margin > span:
            cells[-1] = "▸"
    return "".join(cells)


def block_bar(value: float, scale: float, width: int) -> str:
    """A signed bar: ``◂◂◂`` towards unfavourable, ``▸▸▸`` towards favourable."""
    if not math.isfinite(value) or scale <= 0:
        return ""
    n = min(width, max(1, round(abs(value) / scale * width))) if value != 0 else 0
    return ("▸" if value > 0 else "◂") * n
