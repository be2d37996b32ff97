"""Text for every view: the one sanitiser, signed numbers, percentages and sparklines.

Pure functions on ``str`` and numbers; no terminal or widget library is imported, so the CLI,
the review screens and the HTML report share them without importing each other.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import pandas as pd

#: Characters never sent to a terminal as they are (shown as visible escapes instead): C0 and
#: C1 control characters and DEL (ESC starts colour, cursor, title and hyperlink sequences; BEL,
#: CR and backspace rewrite what is shown), the bidirectional marks, embeddings, overrides and
#: isolates (they reorder the text around them: Unicode TR #9), the zero-width characters and
#: the line and paragraph separators (they hide or split text).
UNSAFE_CHARACTERS = (
    "\x00-\x1f\x7f-\x9f"  # C0 controls (tab and LF included), DEL, C1 controls
    "\u061c"  # Arabic letter mark
    "\u200b-\u200f"  # zero-width space, non-joiner, joiner; left-to-right / right-to-left marks
    "\u2028-\u202e"  # line and paragraph separators; bidi embeddings and overrides
    "\u2060-\u2064"  # word joiner and the invisible operators
    "\u2066-\u2069"  # bidi isolates
    "\ufeff"  # zero-width no-break space (byte order mark)
)
UNSAFE = re.compile(f"[{UNSAFE_CHARACTERS}]")
#: The same, line feeds excepted (for multi-line notes and for structural JSON line feeds).
UNSAFE_IN_LINES = re.compile(f"(?!\n)[{UNSAFE_CHARACTERS}]")
_NAMED = {"\t": "\\t", "\n": "\\n", "\r": "\\r"}
#: The true minus sign used by :func:`signed` unless told otherwise.
MINUS = "−"


def _visible(match: re.Match[str]) -> str:
    ch = match.group()
    code = ord(ch)
    return _NAMED.get(ch) or (f"\\x{code:02x}" if code <= 0xFF else f"\\u{code:04x}")


def safe_text(text: str, *, multiline: bool = False) -> str:
    """Text safe to show on a terminal or in a page: the one sanitiser of every view.

    Every character of :data:`UNSAFE_CHARACTERS` becomes a visible escape (``\\x1b``,
    ``\\r``, ``\\u202e``); the rest is unchanged. Markup (rich, HTML) is not touched: each
    view escapes its own markup after this.

    Parameters
    ----------
    text
        A data label (group level, column name, category value), case id, note, reviewer
        name or message quoting any of them.
    multiline
        Keep line feeds (for notes shown as several lines); a carriage return or a tab is
        escaped all the same.

    Examples
    --------
    >>> safe_text("A\\x1b[31m")
    'A\\\\x1b[31m'
    """
    pattern = UNSAFE_IN_LINES if multiline else UNSAFE
    return pattern.sub(_visible, text) if pattern.search(text) else text


def json_safe(text: str) -> str:
    """JSON text with the unsafe characters still raw in it written as ``\\uXXXX`` escapes.

    The values are unchanged (a JSON reader gets the exact text back); only the bytes become
    safe for a terminal. The structural line feeds of indented JSON or JSON Lines are kept
    (JSON writers escape every C0 control character inside strings already, so a raw line
    feed can only be structure).
    """
    return UNSAFE_IN_LINES.sub(lambda m: f"\\u{ord(m.group()):04x}", text)


def escape_text_cells(table: pd.DataFrame) -> tuple[pd.DataFrame, int]:
    """A copy of a table for a terminal: every text cell through :func:`safe_text` (line
    feeds kept); returns it with the number of cells changed.

    Only the cells holding an unsafe character are rewritten (found with one vectorised match
    per text column).
    """
    import pandas as pd

    out = table.copy()
    changed = 0
    for col in out.columns:
        series = out[col]
        if not (series.dtype == object or pd.api.types.is_string_dtype(series)):
            continue
        text = series.astype("string")
        hit = text.str.contains(UNSAFE_IN_LINES).fillna(False).to_numpy(dtype=bool)
        if hit.any():
            values = series.astype(object).to_numpy(copy=True)
            values[hit] = [safe_text(str(v), multiline=True) for v in values[hit]]
            out[col] = values
            changed += int(hit.sum())
    return out, changed


def signed(value: float | None, digits: int = 2, *, minus: str = MINUS) -> str:
    """A number with its sign (``+0.42``, ``−0.42``); '—' when missing or not finite.

    A value that rounds to zero at ``digits`` is shown as ``0.00``, never ``+0.00`` or
    ``−0.00`` (a sign there would claim a side of the threshold the number does not show).

    Examples
    --------
    >>> signed(0.4213), signed(-1.5, 1), signed(-0.001)
    ('+0.42', '−1.5', '0.00')
    """
    if value is None or not math.isfinite(value):
        return "—"
    text = f"{value:+.{digits}f}"
    if float(text) == 0.0:
        return f"{0.0:.{digits}f}"
    return text.replace("-", minus)


def percent(value: float | None, digits: int = 0) -> str:
    """A 0..1 share as a percentage (``42%``); '—' when missing or not finite.

    Examples
    --------
    >>> percent(0.4213), percent(0.4213, 1), percent(float("nan"))
    ('42%', '42.1%', '—')
    """
    if value is None or not math.isfinite(value):
        return "—"
    return f"{100 * value:.{digits}f}%"


def share_of(part: int, whole: int) -> str:
    """``part`` of ``whole`` as a percentage (one decimal below 1%); '—' when ``whole`` is not
    positive.

    Examples
    --------
    >>> share_of(21, 50), share_of(1, 400), share_of(0, 0)
    ('42%', '0.2%', '—')
    """
    if whole <= 0:
        return "—"
    pct = 100 * part / whole
    return f"{pct:.0f}%" if pct >= 1 or pct == 0 else f"{pct:.1f}%"


#: Block characters of a sparkline, blank to full.
SPARKS = " ▁▂▃▄▅▆▇█"


def sparkline(counts: Sequence[float], peak: float) -> str:
    """Counts as block characters, 0 → blank, ``peak`` → full block.

    Examples
    --------
    >>> sparkline([0, 1, 4, 8], 8)
    ' ▁▄█'
    """
    if peak <= 0:
        return " " * len(counts)
    top = len(SPARKS) - 1
    out = []
    for c in counts:
        level = 0 if c <= 0 else max(1, min(top, math.ceil(c / peak * top)))
        out.append(SPARKS[level])
    return "".join(out)


# --------------------------------------------------------------------------- plain ASCII

#: Every non-ASCII glyph the views draw, with the one ASCII character that stands for it on a
#: console whose font lacks it (``closecall review --ascii``; automatic on ``TERM=linux``).
#: One character for one: columns stay aligned. Legends (help, key bars) go through the same
#: table, so a mark and its explanation always agree.
ASCII_GLYPHS = {
    # cursor, arrows, directions
    "▶": ">", "▸": ">", "◂": "<", "►": ">", "◀": "<", "→": ">", "←": "<", "↑": "^",
    "↓": "v", "⇄": "X", "⏎": "J", "▲": "^", "▼": "v",
    # marks
    "●": "*", "○": "-", "◉": "x", "◆": "@", "◇": "o", "✓": "+", "✗": "x", "⚑": "!",
    "≈": "~", "±": "~", "·": ".", "…": ".", "—": "-", "–": "-", "−": "-", "×": "x",
    "≥": ">", "≤": "<", "“": '"', "”": '"', "‘": "'", "’": "'", "«": "<", "»": ">",
    "\u00a0": " ", "ε": "e", "½": "h",
    # lines and corners (box drawing)
    "─": "-", "━": "=", "│": "|", "┃": "|", "╎": ":", "┆": ":", "┊": ":", "╌": "-",
    "┼": "+", "┿": "#", "╋": "#", "╂": "+", "═": "=", "║": "|",
    "╭": "+", "╮": "+", "╰": "+", "╯": "+", "┌": "+", "┐": "+", "└": "+", "┘": "+",
    "├": "+", "┤": "+", "┬": "+", "┴": "+", "╔": "+", "╗": "+", "╚": "+", "╝": "+",
    "╶": "-", "╴": "-", "╷": "|", "╵": "|",
    # blocks: sparklines low to high, bars, borders and scroll bars
    "▁": ".", "▂": ",", "▃": ":", "▄": "-", "▅": "=", "▆": "+", "▇": "*", "█": "#",
    "▌": "|", "▐": "|", "▊": "|", "▋": "|", "▍": "|", "▎": "|", "▏": "|", "▉": "#",
    "▔": "-", "▀": "^", "░": ":", "▒": "%", "▓": "#",
}  # fmt: skip
_ASCII_TABLE = str.maketrans(ASCII_GLYPHS)


def to_ascii(text: str) -> str:
    """``text`` with every character below 128, cell for cell (for glyph-poor consoles).

    Glyphs of :data:`ASCII_GLYPHS` become their stand-in; an accented letter loses its accent
    (``é`` → ``e``); anything else becomes ``?`` — one ``?`` per terminal cell, so a wide
    character keeps its two cells and the columns after it stay in place.

    Examples
    --------
    >>> to_ascii("▶ Zoë ▸▸▸ +0.42 ✓ →fav ━━●━━")
    '> Zoe >>> +0.42 + >fav ==*=='
    """
    if text.isascii():
        return text
    out = text.translate(_ASCII_TABLE)
    if out.isascii():
        return out
    return "".join(ch if ch.isascii() else _ascii_char(ch) for ch in out)


def _ascii_char(ch: str) -> str:
    import unicodedata

    if unicodedata.combining(ch) or unicodedata.category(ch) in ("Mn", "Me", "Cf"):
        return ""  # no cell of its own
    width = 2 if unicodedata.east_asian_width(ch) in ("W", "F") else 1
    base = "".join(c for c in unicodedata.normalize("NFKD", ch) if c.isascii())
    return (base[:width] if base.isprintable() and base else "").ljust(width, "?")
