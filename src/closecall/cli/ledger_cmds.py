"""`closecall record` and `closecall ledger show|verify`: thin layers over ``closecall.Study``."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

import typer
from rich import box
from rich.table import Table
from rich.text import Text

from closecall.api.study import Ledger, Study
from closecall.cli.common import ConfigOption, FormatOption, JsonOption, load, resolve_format
from closecall.cli.errors import fix_words
from closecall.cli.output import Format, console, emit_json, emit_rows
from closecall.core.text import safe_text

if TYPE_CHECKING:
    from closecall.review.ledger.verify import VerifyResult
from closecall.core.errors import UserError
from closecall.core.vocabulary import ACTIONS
from closecall.review.decisions import check_text
from closecall.review.ledger import Entry, canonical_json
from closecall.setup.config import DEFAULT_REASONS


def _read_note_file(path: Path) -> str:
    try:
        data = sys.stdin.buffer.read() if str(path) == "-" else path.read_bytes()
    except OSError as exc:
        raise UserError(f"{path}: cannot read the note file ({exc.strerror})") from None
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise UserError(
            f"{path}: the note is not valid UTF-8 (byte {exc.start + 1})",
            "save the note as UTF-8 text",
        ) from None


def _print(text: str) -> None:
    console.print(text, markup=False, highlight=False, soft_wrap=True)


def record(
    case_id: str = typer.Argument(..., help="The case reviewed (its id in the data)."),
    action: str = typer.Option(..., "--action", "-a", help=f"One of: {', '.join(ACTIONS)}."),
    reason: str | None = typer.Option(
        None,
        "--reason",
        "-r",
        help="A reason code from the study's [review] reasons; required to override. "
        f"Defaults: {', '.join(DEFAULT_REASONS)} ('closecall reasons' lists the study's).",
    ),
    note: str | None = typer.Option(
        None, "--note", "-n", help="Why; stored exactly as typed. Required to override."
    ),
    note_file: Path | None = typer.Option(
        None, "--note-file", help="Read the note from this UTF-8 file ('-' for standard input)."
    ),
    supersedes: int | None = typer.Option(
        None,
        "--supersedes",
        help="Sequence number of an earlier entry for this case to correct or replace "
        "(also another reviewer's: the new entry takes its place).",
    ),
    second_opinion: bool = typer.Option(
        False,
        "--second-opinion",
        help="Record beside another reviewer's decision on this case instead of replacing it "
        "(if the two disagree, the case shows as a conflict).",
    ),
    config: Path = ConfigOption,
    as_json: bool = typer.Option(False, "--json", help="Print the new entry as JSON."),
) -> None:
    """Record your decision on a case in the ledger (as your login; never edited later).

    Prints the new entry's sequence number and hash. A correction is a new entry that names
    the one it supersedes. If another reviewer already has a decision on the case, recording
    is refused (naming their entry) unless you replace it with --supersedes N or add yours
    with --second-opinion.

    \b
    Example:
      closecall record HR-0000117 --action override-favourable \\
          --reason information-not-in-model --note "Income verified by letter of 3 May."
    """
    if note is not None and note_file is not None:
        raise UserError("give the note with --note or with --note-file, not both")
    text = _read_note_file(note_file) if note_file is not None else (note or "")
    check_text("--note", text)  # before the study is opened: fail fast on undecodable bytes
    study = Study(load(config, quiet=as_json))
    entry = study.record(
        case_id,
        action,
        reason=reason,
        note=text,
        supersedes=supersedes,
        second_opinion=second_opinion,
    )
    if as_json:
        emit_json(entry.to_dict())
        return
    _print(
        f"recorded entry {entry.seq}: case {safe_text(entry.case_id)}, {entry.action}"
        + (f" ({safe_text(entry.reason)})" if entry.reason else "")
        + f", by {safe_text(entry.reviewer)}"
    )
    _print(f"hash {entry.hash}")
    if entry.current_snapshot_id:
        _print(
            f"note: reviewed against snapshot {entry.snapshot_id[:12]}; the current snapshot "
            f"is {entry.current_snapshot_id[:12]} (both are recorded)"
        )


ledger_app = typer.Typer(
    help="Read and check the review ledger.\n\n\b\nExample:\n  closecall ledger verify",
    no_args_is_help=True,
    rich_markup_mode=None,
)


def _preview(note: str, width: int) -> str:
    flat = safe_text(" ".join(note.split()))
    return flat if len(flat) <= width else flat[: max(width - 1, 0)] + "…"


def _table(entries: list[Entry], ledger: Path | str) -> Table:
    """A compact table as wide as the terminal; the note gets the room that is left.

    Cells are Text, never read as rich markup, and control characters are shown as codes.
    """
    headers = ("#", "time (UTC)", "by", "case", "action / reason")
    cells = [
        (
            str(e.seq),
            e.time[:16].replace("T", " "),
            safe_text(e.reviewer),
            safe_text(e.case_id),
            "\n".join(
                [e.action]
                + ([safe_text(e.reason)] if e.reason else [])
                + ([f"corrects #{e.supersedes}"] if e.supersedes is not None else [])
            ),
        )
        for e in entries
    ]
    widths = [
        max([len(h)] + [max(len(line) for line in row[k].split("\n")) for row in cells])
        for k, h in enumerate(headers)
    ]
    widths[2] = min(widths[2], 12)  # long logins are cut
    widths[3] = min(widths[3], 24)  # and long case ids
    widths[4] = min(widths[4], len("override-unfavourable"))  # and long reason codes
    table = Table(
        title=Text(f"ledger {safe_text(str(ledger))}"),
        caption=(
            f"{len(entries)} entries; notes shortened (--json shows every field)"
            if entries
            else "no entries"
        ),
        box=box.SIMPLE_HEAD,
        pad_edge=False,
        expand=True,
        header_style="bold",
    )
    for header, w in zip(headers, widths, strict=True):
        table.add_column(
            header,
            no_wrap=True,
            overflow="ellipsis",
            min_width=w,
            max_width=w,
            justify="right" if header == "#" else "left",
        )
    table.add_column("note", no_wrap=True, overflow="ellipsis", ratio=1, min_width=12)
    for e, row in zip(entries, cells, strict=True):
        table.add_row(
            *(Text(safe_text(c, multiline=True)) for c in row), Text(_preview(e.note, 400))
        )
    return table


def _csv_row(e: Entry) -> dict[str, Any]:
    row = e.to_dict()
    row["decisions"] = canonical_json(e.decisions).decode("utf-8")
    # emit_rows escapes control characters for the terminal (exact text: --json or an export)
    return row


@ledger_app.command("show")
def show(
    case: str | None = typer.Option(None, "--case", help="Only entries for this case id."),
    reviewer: str | None = typer.Option(None, "--reviewer", help="Only entries by this login."),
    limit: int | None = typer.Option(None, "--limit", help="Only the most recent N entries."),
    fmt: Format = FormatOption,
    as_json: bool = JsonOption,
    config: Path = ConfigOption,
) -> None:
    """List ledger entries, oldest first.

    The table shortens notes; --json prints every field exactly (JSON escapes included).
    Control and escape characters in notes are shown as visible codes, never sent to the
    terminal.

    \b
    Example:
      closecall ledger show --case C-000117
      closecall ledger show --reviewer alice --limit 20 --json
    """
    ledger = Ledger.open(config)
    cfg = ledger.config
    entries = list(ledger.show(case_id=case, reviewer=reviewer, limit=limit).entries)
    fmt = resolve_format(fmt, as_json)
    meta = {"ledger": str(cfg.review.ledger), "count": len(entries)}
    if fmt is Format.json:
        emit_rows([e.to_dict() for e in entries], fmt, meta=meta)
    elif fmt is Format.csv:
        emit_rows([_csv_row(e) for e in entries], fmt, columns=_csv_columns())
    else:
        console.print(_table(entries, cfg.review.ledger), width=max(console.width, 80))


def _csv_columns() -> list[str]:
    from closecall.review.ledger.entry import HASHED_FIELDS

    return [*HASHED_FIELDS, "hash"]


@ledger_app.command("verify")
def verify(
    anchor: str | None = typer.Option(
        None, "--anchor", help="A head hash kept elsewhere earlier; it must still be in the chain."
    ),
    allow_empty: bool = typer.Option(
        False,
        "--allow-empty",
        help="Accept a missing or empty ledger (a study with no reviews yet) as intact.",
    ),
    as_json: bool = JsonOption,
    config: Path = ConfigOption,
) -> None:
    """Check the ledger: there, its structure and triggers as closecall made them, the hash
    chain intact; name the first broken entry; print the head hash.

    Exit code 0 when every check passes (and the chain holds the anchor), 1 when one fails —
    a missing or empty ledger fails too, unless --allow-empty — and 2 for a usage error.
    Keep the printed head hash somewhere the ledger's owners cannot write (a daily e-mail,
    another server); pass it back with --anchor to detect entries cut from the end.

    \b
    Example:
      closecall ledger verify
      closecall ledger verify --anchor 3f1c…(64 hex characters)
    """
    ledger = Ledger.open(config)
    cfg = ledger.config
    result = ledger.verify(anchor, allow_empty=allow_empty)
    if as_json:
        emit_json({"ledger": str(cfg.review.ledger), **result.to_dict()})
    else:
        where = safe_text(str(cfg.review.ledger))
        if result.ok:
            _print(
                f"ledger {where}: {result.entries} entries, chain intact"
                + (" (empty allowed by --allow-empty)" if result.entries == 0 else "")
            )
            if result.anchor is not None:
                _print(f"anchor found at entry {result.anchor_seq}")
        elif result.first_broken is not None or result.verified < result.entries:
            _print(f"ledger {where}: BROKEN after {result.verified} good entries")
        elif result.entries:
            _print(
                f"ledger {where}: BROKEN: the chain of {result.entries} entries holds, but the "
                "file was changed"
            )
        else:
            _print(f"ledger {where}: NOT VERIFIED")
        for problem in result.problems:  # may quote tampered values: escape them
            _print(f"  {safe_text(problem.message)}")
            if problem.remedy is not None:
                _print(f"  fix: {fix_words(problem.remedy)}")
        if result.entries:
            _print(_authorship_line(result))
        _print(f"head {result.head_seq} {safe_text(str(result.head_hash))}")
    if not result.ok:
        raise typer.Exit(1)


def _authorship_line(result: VerifyResult) -> str:
    """One line on signatures: how many checked, which entries are unsigned."""
    unsigned = result.unsigned
    listed = ", ".join(str(s) for s in unsigned[:10]) + (" …" if len(unsigned) > 10 else "")
    tail = f"; {len(unsigned)} unsigned (older entries): {listed}" if unsigned else ""
    if not result.keys_checked:
        return (
            "signatures: not checked (no public keys registered under [team.keys]; "
            f"see docs/team.md){tail}"
        )
    return f"signatures: {result.signed} verified against registered keys{tail}"


def register(app: typer.Typer) -> None:
    """Add `record` and the `ledger` group to the closecall app."""
    app.command("record")(record)
    try:
        from closecall.cli.export_cmds import register_ledger_export
    except ModuleNotFoundError as exc:  # `ledger export` not written yet
        if exc.name != "closecall.cli.export_cmds":
            raise
    else:
        register_ledger_export(ledger_app)
    from closecall.cli.ledger_pg_cmds import register_ledger_team

    register_ledger_team(ledger_app)
    from closecall.cli.team_cmds import register_ledger_anchor

    register_ledger_anchor(ledger_app)
    app.add_typer(ledger_app, name="ledger")
