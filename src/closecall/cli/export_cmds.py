"""`closecall ledger export`: the analyst export, a thin layer over ``Study.ledger``."""

from __future__ import annotations

import sys
from enum import StrEnum
from pathlib import Path
from typing import TYPE_CHECKING

import typer

from closecall.api.study import Ledger, Study
from closecall.cli.common import ConfigOption, load
from closecall.cli.errors import fix_words
from closecall.cli.output import err_console
from closecall.core.errors import UserError
from closecall.core.text import escape_text_cells, json_safe, safe_text
from closecall.setup.output_files import StudyFile, check_key_file, check_output, study_files

if TYPE_CHECKING:
    import pandas as pd

    from closecall.reports.export import ExportResult


class ExportFormat(StrEnum):
    csv = "csv"
    parquet = "parquet"
    jsonl = "jsonl"


AllEntriesOption = typer.Option(
    False, "--all-entries", help="Every ledger entry, not only each case's effective review."
)
PseudonymiseOption = typer.Option(
    None,
    "--pseudonymise",
    help="Replace case ids with keyed HMAC-SHA256 pseudonyms; the key is kept in this file "
    "(created, readable by you only, if missing). Same key, same pseudonyms.",
)
SpreadsheetOption = typer.Option(
    False,
    "--spreadsheet-safe",
    help="Prefix an apostrophe to text cells that start with = + - @ (also after leading "
    "whitespace), a tab or a CR, so a spreadsheet opening the file cannot run them as "
    "formulas (the text is then not byte-exact).",
)
OutOption = typer.Option(
    None,
    "--out",
    "-o",
    help="Write to this file (readable by you only); default stdout. Never one of the "
    "study's files; an existing file needs --force.",
)


def export(
    fmt: ExportFormat = typer.Option(
        ExportFormat.csv, "--format", "-f", help="csv, parquet or jsonl.", case_sensitive=False
    ),
    all_entries: bool = AllEntriesOption,
    key_file: Path | None = PseudonymiseOption,
    reviewers: bool = typer.Option(
        False, "--pseudonymise-reviewers", help="Pseudonymise reviewer names too."
    ),
    no_notes: bool = typer.Option(False, "--no-notes", help="Leave the free-text notes out."),
    spreadsheet: bool = SpreadsheetOption,
    out: Path | None = OutOption,
    force: bool = typer.Option(False, "--force", help="Replace an existing --out file."),
    config: Path = ConfigOption,
) -> None:
    """Export the review record for analysis: one row per reviewed case by default.

    Each row: case, group, reviewer, the reference model's margin and decision, the action, the
    final decision (empty for a deferral), reason, note, and every model's margin and decision
    as the reviewer saw them. With --pseudonymise the entry hashes are left out (they would
    let anyone confirm a guessed case id). A file (--out) holds the exact text; on standard
    output control and bidi characters are escaped (CSV shows them as codes such as \x1b).

    \b
    Example:
      closecall ledger export --format parquet --out reviews.parquet
      closecall ledger export --pseudonymise ~/.closecall-key --no-notes --out reviews.csv
      closecall ledger export --spreadsheet-safe --out reviews-for-excel.csv
    """
    ledger = Ledger.open(config)
    cfg = ledger.config
    entries = ledger.show()  # checks read access before anything else
    protected = study_files(cfg, key_file=key_file)
    if key_file is not None:  # before anything is fitted or created
        check_key_file(key_file, study_files(cfg))
    if out is not None:
        check_output(out, protected, field="out", force=force, example=f"reviews.{fmt.value}")
    if fmt is ExportFormat.parquet and out is None and sys.stdout.isatty():
        raise UserError("Parquet is binary and will not be printed", "add --out FILE.parquet")
    result = Study(load(config, quiet=True)).ledger.export_details(
        entries=entries,
        all_entries=all_entries,
        key_file=key_file,
        pseudonymise_reviewers=reviewers,
        notes=not no_notes,
    )
    _tell_about(result)
    table = result.table
    if spreadsheet:
        from closecall.reports.export import spreadsheet_safe  # heavy: on use

        table = spreadsheet_safe(table)
    _write_table(table, fmt, out, protected, force, result.entries, all_entries)


def _tell_about(result: ExportResult) -> None:
    """On standard error: a key file just created, warnings and what to do about them."""
    if result.key_created and result.key_file is not None:
        err_console.print(
            f"created the key file {safe_text(str(result.key_file))} (mode 600): keep it; the "
            "same key gives the same pseudonyms",
            markup=False,
        )
    for warning in result.warnings:
        err_console.print(f"note: {safe_text(warning)}", markup=False)
    for advice in result.advice:
        err_console.print(f"  fix: {fix_words(advice)}", markup=False)


def _write_table(
    table: pd.DataFrame,
    fmt: ExportFormat,
    out: Path | None,
    protected: tuple[StudyFile, ...],
    force: bool,
    read: int,
    all_entries: bool,
) -> None:
    """The table to standard output (escaped) or to the ``out`` file (exact)."""
    from closecall.reports.export import write_export  # heavy: on use

    what = "entries" if all_entries else "effective reviews"
    if out is None:
        sys.stdout.buffer.write(_terminal_bytes(table, fmt.value))
        sys.stdout.flush()
        return
    write_export(table, fmt.value, out, protected=protected, force=force)
    err_console.print(
        f"wrote {len(table)} {what} ({read} ledger entries read) to {safe_text(str(out))}",
        markup=False,
    )


def _terminal_bytes(table: pd.DataFrame, fmt: str) -> bytes:
    """The export for standard output: nothing reaches a terminal raw.

    JSON Lines keeps every value exact (unsafe characters written as \\uXXXX escapes); CSV
    cannot, so its text cells show them as visible escapes (``\\x1b``, ``\\r``), lines end
    with LF, and a note on standard error says how many cells and how to get the exact text.
    Parquet is binary (refused on a terminal) and goes out as it is.
    """
    from closecall.reports.export import table_bytes

    if fmt == "jsonl":
        return json_safe(table_bytes(table, fmt).decode("utf-8")).encode("utf-8")
    if fmt != "csv":
        return table_bytes(table, fmt)
    shown, changed = escape_text_cells(table)
    if changed:
        err_console.print(
            f"note: {changed} cell(s) hold control, bidi or zero-width characters, shown here "
            "as escapes such as \\x1b; write with --out FILE for the exact text",
            markup=False,
        )
    return table_bytes(shown, fmt, line_end="\n")


def register_ledger_export(ledger_app: typer.Typer) -> None:
    """Add `export` to the `closecall ledger` group."""
    ledger_app.command("export")(export)
