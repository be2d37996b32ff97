"""The `closecall` command: builds the typer app from the command modules."""

from __future__ import annotations

import importlib
import sys

import typer
from rich.markup import escape

from closecall import __version__
from closecall.cautions import CAUTIONS_TEXT
from closecall.cli.output import err_console, safe_text
from closecall.errors import UserError

HELP = f"""Find, explain and review close calls made with a scoring model.

closecall supports human review of borderline decisions: it ranks the cases nearest the
threshold or decided differently by equally defensible models, shows how much each margin rests
on the group attribute and its proxies, keeps reviewers' decisions in a tamper-evident ledger,
and measures whether overrides narrowed or widened the gaps between groups.

Cautions:

{CAUTIONS_TEXT}

Start with: closecall demo --out demo-study && cd demo-study && closecall queue
"""

app = typer.Typer(
    name="closecall",
    help=HELP,
    no_args_is_help=True,
    add_completion=False,
    rich_markup_mode=None,
    pretty_exceptions_enable=False,
)

# Each module defines `register(app)`; listed here so the order of --help is stable.
COMMAND_MODULES = (
    "closecall.cli.study_cmds",
    "closecall.cli.explain_cmds",
    "closecall.cli.ledger_cmds",
    "closecall.cli.disparity_cmds",
    "closecall.cli.review_cmds",
)


def _version(value: bool) -> None:
    if value:
        print(f"closecall {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: bool = typer.Option(
        False, "--version", callback=_version, is_eager=True, help="Show the version and exit."
    ),
) -> None:
    """Find, explain and review close calls made with a scoring model."""


for _name in COMMAND_MODULES:
    try:
        _module = importlib.import_module(_name)
    except ModuleNotFoundError as exc:  # a command module not written yet
        if exc.name != _name:
            raise
        continue
    _module.register(app)


def main() -> None:
    """Entry point: runs the app, turning user errors into one message and exit code 2."""
    try:
        app()  # standalone: usage errors print their own message and exit 2
    except UserError as exc:
        err_console.print(f"[bold red]error:[/] {escape(safe_text(exc.message))}", soft_wrap=True)
        if exc.fix:
            err_console.print(f"  [bold]fix:[/] {escape(safe_text(exc.fix))}", soft_wrap=True)
        sys.exit(exc.exit_code)
    except KeyboardInterrupt:
        err_console.print("interrupted")
        sys.exit(130)
