"""Shared output for every command: rich tables on a terminal, JSON or CSV as data."""

from __future__ import annotations

import csv
import json
import math
import re
import sys
from collections.abc import Iterable, Mapping, Sequence
from enum import StrEnum
from typing import Any

import numpy as np
from rich.console import Console
from rich.table import Table
from rich.text import Text

console = Console(highlight=False)
err_console = Console(stderr=True, highlight=False)

_CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069]")


class Format(StrEnum):
    table = "table"
    json = "json"
    csv = "csv"


def safe_text(text: str) -> str:
    """Text safe to show on a terminal: control and escape characters shown as visible codes."""
    return _CONTROL.sub(lambda m: f"\\x{ord(m.group()):02x}", text)


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
    """JSON for a terminal: readable UTF-8, but control, C1 and bidi-override characters are
    written as \\uXXXX escapes, so the data stay exact and nothing reaches the screen raw."""
    text = json.dumps(to_jsonable(obj), indent=2, ensure_ascii=False)
    return _CONTROL.sub(lambda m: f"\\u{ord(m.group()):04x}", text)


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
        writer = csv.DictWriter(sys.stdout, fieldnames=cols, extrasaction="ignore")
        writer.writeheader()
        for r in rows:
            writer.writerow({k: to_jsonable(r.get(k)) for k in cols})
        return
    table = Table(title=title, caption=caption, show_lines=False, header_style="bold")
    for c in cols:
        table.add_column(c, overflow="fold")
    for r in rows:
        table.add_row(*(Text(format_cell(r.get(c))) for c in cols))
    console.print(table)


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
