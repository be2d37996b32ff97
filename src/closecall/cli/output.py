"""Shared output for every command: rich tables on a terminal, JSON or CSV as data."""

from __future__ import annotations

import csv
import json
import math
import sys
from collections.abc import Iterable, Mapping, Sequence
from enum import StrEnum
from typing import Any

import numpy as np
from rich.console import Console
from rich.markup import escape
from rich.table import Table
from rich.text import Text

from closecall.core.text import json_safe, safe_text, signed

console = Console(highlight=False)
err_console = Console(stderr=True, highlight=False)


class Format(StrEnum):
    table = "table"
    json = "json"
    csv = "csv"


def safe_markup(text: object) -> str:
    """Data text for a rich markup string: unsafe characters and markup both escaped."""
    return escape(safe_text(str(text)))


def plain(text: object, style: str = "") -> Text:
    """Data text as a rich Text (never read as markup), unsafe characters escaped."""
    return Text(safe_text(str(text)), style=style)


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
        f = float(value)
        return signed(f, 3, minus="-") if abs(f) < 1000 else f"{f:.4g}"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    return safe_text(str(value))
