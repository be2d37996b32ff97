"""The `closecall` command: builds the typer app from the command modules."""

from __future__ import annotations

import importlib
import sys

import typer

from closecall import __version__
from closecall.cli.errors import error_lines
from closecall.cli.output import err_console, safe_markup
from closecall.core.cautions import CAUTIONS
from closecall.core.errors import UserError

_CAUTION_PARAGRAPHS = "\n\n".join(f"- {line}" for line in CAUTIONS)  # one paragraph each

HELP = f"""Find, explain and review close calls made with a scoring model.

closecall supports human review of borderline decisions: it ranks the cases nearest the
threshold or decided differently by equally defensible models, shows how much each margin rests
on the group attribute and its proxies, keeps reviewers' decisions in a tamper-evident ledger,
and measures whether overrides narrowed or widened the gaps between groups.

Cautions:

{_CAUTION_PARAGRAPHS}

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
    "closecall.cli.queue_cmds",
    "closecall.cli.explain_cmds",
    "closecall.cli.ledger_cmds",
    "closecall.cli.disparity_cmds",
    "closecall.cli.review_cmds",
    "closecall.cli.reasons_cmds",
    "closecall.cli.model_cmds",
    "closecall.cli.team_cmds",
    "closecall.cli.whatif_cmds",
)
# Which module holds each command: a command loads only its own module (and so only the
# engine parts it needs), which keeps `closecall ledger verify` or `closecall review` quick to
# start. Help, completion and unknown words load them all.
COMMAND_HOME = {
    "init": "study_cmds",
    "demo": "study_cmds",
    "fit": "study_cmds",
    "queue": "queue_cmds",
    "explain": "explain_cmds",
    "proxies": "explain_cmds",
    "bands": "explain_cmds",
    "compare": "explain_cmds",
    "record": "ledger_cmds",
    "ledger": "ledger_cmds",
    "disparity": "disparity_cmds",
    "demo-reviews": "disparity_cmds",
    "review": "review_cmds",
    "reasons": "reasons_cmds",
    "model": "model_cmds",
    "keys": "team_cmds",
    "team": "team_cmds",
    "whatif": "whatif_cmds",
}
_registered: set[str] = set()


def _register(names: tuple[str, ...]) -> None:
    for name in names:
        if name in _registered:
            continue
        _registered.add(name)
        importlib.import_module(name).register(app)


def register_for(argv: list[str]) -> None:
    """Register the command module the first word of argv needs (all of them if unsure)."""
    first = next((a for a in argv if not a.startswith("-")), None)
    home = COMMAND_HOME.get(first or "")
    if home is None or any(a in ("--help", "-h") for a in argv[:1]):
        _register(COMMAND_MODULES)
    else:
        _register((f"closecall.cli.{home}",))


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


def main() -> None:
    """Entry point: runs the app, turning user errors into one message and exit code 2."""
    from closecall.core.shared import permission_error, use_study_umask

    use_study_umask()  # files made in a study are the group's (docs/team.md)
    register_for(sys.argv[1:])
    try:
        try:
            app()  # standalone: usage errors print their own message and exit 2
        except PermissionError as exc:  # a file or folder this login may not use
            raise permission_error(exc.filename) from None
    except UserError as exc:
        message, fix = error_lines(exc)
        err_console.print(f"[bold red]error:[/] {safe_markup(message)}", soft_wrap=True)
        if fix:
            err_console.print(f"  [bold]fix:[/] {safe_markup(fix)}", soft_wrap=True)
        sys.exit(exc.exit_code)
    except KeyboardInterrupt:
        err_console.print("interrupted")
        sys.exit(130)
