"""Shared output for every command: rich tables on a terminal, JSON or CSV as data."""

from __future__ import annotations

import csv
import json
import math
import re
import sys
from collections.abc import Iterable, Mapping, Sequence
from enum import StrEnum
from typing import TYPE_CHECKING, Any

import numpy as np
from rich.console import Console
from rich.markup import escape
from rich.table import Table
from rich.text import Text

if TYPE_CHECKING:
    import pandas as pd

console = Console(highlight=False)
err_console = Console(stderr=True, highlight=False)

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
_UNSAFE = re.compile(f"[{UNSAFE_CHARACTERS}]")
_UNSAFE_IN_LINES = re.compile(f"(?!\n)[{UNSAFE_CHARACTERS}]")
_NAMED = {"\t": "\\t", "\n": "\\n", "\r": "\\r"}


class Format(StrEnum):
    table = "table"
    json = "json"
    csv = "csv"


def _visible(match: re.Match[str]) -> str:
    ch = match.group()
    code = ord(ch)
    return _NAMED.get(ch) or (f"\\x{code:02x}" if code <= 0xFF else f"\\u{code:04x}")


def safe_text(text: str, *, multiline: bool = False) -> str:
    """Text safe to show on a terminal: the one sanitiser of every view.

    Every character of :data:`UNSAFE_CHARACTERS` becomes a visible escape (``\\x1b``,
    ``\\r``, ``\\u202e``); the rest is unchanged. Rich markup is not touched: show the result
    in a ``rich.text.Text`` (or print with ``markup=False``), or use :func:`safe_markup`
    inside a markup string.

    Parameters
    ----------
    text
        A data label (group level, column name, category value), case id, note, reviewer
        name or message quoting any of them.
    multiline
        Keep line feeds (for notes shown as several lines); a carriage return or a tab is
        escaped all the same.
    """
    pattern = _UNSAFE_IN_LINES if multiline else _UNSAFE
    return pattern.sub(_visible, text) if pattern.search(text) else text


def safe_markup(text: object) -> str:
    """Data text for a rich markup string: unsafe characters and markup both escaped."""
    return escape(safe_text(str(text)))


def plain(text: object, style: str = "") -> Text:
    """Data text as a rich Text (never read as markup), unsafe characters escaped."""
    return Text(safe_text(str(text)), style=style)


def json_safe(text: str) -> str:
    """JSON text with the unsafe characters still raw in it written as ``\\uXXXX`` escapes.

    The values are unchanged (a JSON reader gets the exact text back); only the bytes become
    safe for a terminal. The structural line feeds of indented JSON or JSON Lines are kept
    (JSON writers escape every C0 control character inside strings already, so a raw line
    feed can only be structure).
    """
    return _UNSAFE_IN_LINES.sub(lambda m: f"\\u{ord(m.group()):04x}", text)


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
        hit = text.str.contains(_UNSAFE_IN_LINES).fillna(False).to_numpy(dtype=bool)
        if hit.any():
            values = series.astype(object).to_numpy(copy=True)
            values[hit] = [safe_text(str(v), multiline=True) for v in values[hit]]
            out[col] = values
            changed += int(hit.sum())
    return out, changed


def to_jsonable(obj: Any) -> Any:
    """Convert numpy scalars/arrays, NaN and other values to plain JSON types."""
    if isinstance(obj, Mapping):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [to_jsonable(v) for v in obj.tolist()]
    if isinstance(obj, (np.bool_,)):
        return bool(obj)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        f = float(obj)
        return None if math.isnan(f) or math.isinf(f) else f
    if hasattr(obj, "to_dict") and callable(obj.to_dict):
        return to_jsonable(obj.to_dict())
    if hasattr(obj, "__fspath__"):
        return str(obj)
    return obj


def json_text(obj: Any) -> str:
    """JSON for a terminal: readable UTF-8, but control, C1, bidi and zero-width characters
    are written as \\uXXXX escapes, so the data stay exact and nothing reaches the screen raw."""
    return json_safe(json.dumps(to_jsonable(obj), indent=2, ensure_ascii=False))


def emit_json(obj: Any) -> None:
    """Print data as JSON on stdout (no colour, no wrapping)."""
    sys.stdout.write(json_text(obj) + "\n")


def emit_rows(
    rows: Sequence[Mapping[str, Any]],
    fmt: Format,
    *,
    title: str | None = None,
    columns: Iterable[str] | None = None,
    caption: str | None = None,
    meta: Mapping[str, Any] | None = None,
) -> None:
    """Print a listing as a rich table, as JSON ({meta..., rows: [...]}) or as CSV."""
    cols = list(columns) if columns is not None else (list(rows[0].keys()) if rows else [])
    if fmt is Format.json:
        emit_json({**(meta or {}), "rows": [dict(r) for r in rows]})
        return
    if fmt is Format.csv:
        # CSV on a terminal: text cells escaped like every view (line feeds kept, quoted by the
        # writer); lines end with LF, so no carriage return reaches the screen.
        writer = csv.writer(sys.stdout, lineterminator="\n")
        writer.writerow([safe_text(c) for c in cols])
        for r in rows:
            writer.writerow([_csv_cell(r.get(k)) for k in cols])
        return
    table = Table(title=title, caption=caption, show_lines=False, header_style="bold")
    for c in cols:
        table.add_column(plain(c), overflow="fold")
    for r in rows:
        table.add_row(*(Text(format_cell(r.get(c))) for c in cols))
    console.print(table)


def _csv_cell(value: Any) -> Any:
    value = to_jsonable(value)
    if value is None or isinstance(value, (bool, int, float)):
        return value
    return safe_text(str(value), multiline=True)


def format_cell(value: Any) -> str:
    """A value as plain display text (use it inside rich.text.Text: no markup is read)."""
    if value is None:
        return "—"
    if isinstance(value, (float, np.floating)):
        if math.isnan(float(value)):
            return "—"
        return f"{float(value):+.3f}" if abs(float(value)) < 1000 else f"{float(value):.4g}"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    return safe_text(str(value))
