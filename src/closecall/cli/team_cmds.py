"""`closecall keys init|show` (an author's signing key) and `closecall team check|setup`
(the study folder set up for a team): docs/team.md."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import typer

from closecall.cli.common import ConfigOption, JsonOption
from closecall.cli.output import console, emit_json
from closecall.core.text import safe_text

if TYPE_CHECKING:
    from closecall.api.team import KeyRegistration, TeamCheck

keys_app = typer.Typer(
    help="Your signing key: every entry you record carries your signature.\n\n\b\n"
    "Example:\n  closecall keys init",
    no_args_is_help=True,
)


def _print(text: str) -> None:
    console.print(text, markup=False, highlight=False, soft_wrap=True)


def _print_registration(key: KeyRegistration) -> None:
    _print("ask the study owner to add this line under [team.keys] of the study config:")
    _print(f'{safe_text(key.login)} = "{key.public_key}"')
    _print(f"({safe_text(key.login)} is {key.name_is})")


@keys_app.command("init")
def keys_init(as_json: bool = JsonOption, config: Path = ConfigOption) -> None:
    """Make your Ed25519 key pair (once per account) and print the line to register.

    The private key is written readable by your account only (mode 0600) under
    ~/.config/closecall/keys/ (or the folder CLOSECALL_KEYS names); it is never overwritten.
    Give the printed line to the study owner, who adds it under [team.keys] of the config.
    The line names you as the study's ledger knows you: your OS login for a ledger file, your
    database user for a ledger in PostgreSQL (closecall asks the server).

    \b
    Example:
      closecall keys init --config closecall.toml
    """
    from closecall.api.team import make_signing_key

    made = make_signing_key(config)  # the name is settled first: a refusal leaves nothing
    if as_json:
        emit_json(made.to_dict())
        return
    where = safe_text(str(made.private_key))
    _print(f"private key written to {where} (mode 600: keep it to yourself)")
    _print_registration(made)


@keys_app.command("show")
def keys_show(as_json: bool = JsonOption, config: Path = ConfigOption) -> None:
    """Print your public key as the line to register under [team.keys].

    The line names you as the study's ledger knows you: your OS login for a ledger file, your
    database user for a ledger in PostgreSQL.

    \b
    Example:
      closecall keys show --config closecall.toml
    """
    from closecall.api.team import signing_key

    key = signing_key(config)
    if as_json:
        emit_json(key.to_dict())
        return
    _print_registration(key)


def register(app: typer.Typer) -> None:
    """Add the `keys` and `team` groups to the closecall app."""
    app.add_typer(keys_app, name="keys")
    app.add_typer(team_app, name="team")


team_app = typer.Typer(
    help="Is the study folder set up for a team on one server? (docs/team.md)\n\n\b\n"
    "Example:\n  closecall team check",
    no_args_is_help=True,
)


def _print_problems(check: TeamCheck) -> None:
    for p in check.problems:
        _print(f"  {safe_text(p.where)}: {safe_text(p.message)}")
        _print(f"    fix: {safe_text(p.fix)}")


@team_app.command("check")
def team_check(as_json: bool = JsonOption, config: Path = ConfigOption) -> None:
    """List what is wrong with the study folder's group and modes, its files, the config's
    owner and mode and the reviewer/analyst lists, each with the command that fixes it.

    Exit code 0 when nothing is wrong, 1 when something is.

    \b
    Example:
      closecall team check --config /srv/grants/closecall.toml
    """
    from closecall.api.team import check_team_setup

    check = check_team_setup(config)
    if as_json:
        emit_json(check.to_dict())
    elif check.ok:
        _print("team set-up: sound (nothing to fix)")
    else:
        _print(f"team set-up: {len(check.problems)} problem(s)")
        _print_problems(check)
    if not check.ok:
        raise typer.Exit(1)


@team_app.command("setup")
def team_setup(
    group: str | None = typer.Option(
        None, "--group", help="The writers' group (default: the study folder's group)."
    ),
    readers: str | None = typer.Option(
        None,
        "--readers",
        help="A group of logins that read without writing (analysts): the study becomes "
        "readable by others and the gate folder above it is given to this group.",
    ),
    config: Path = ConfigOption,
) -> None:
    """Set the study folder up for a team (as its owner or root): everything in the group with
    group read/write, folders setgid, the study folder sticky, the config writable by its owner
    only. Prints every change; then runs the check.

    With --readers, analysts outside the writers' group read the study: it must sit in a gate
    folder other logins cannot enter (docs/team.md, Analysts).

    \b
    Example:
      sudo closecall team setup --group reviewers --config /srv/grants/closecall.toml
      sudo closecall team setup --group reviewers --readers grants-readers \\
          --config /srv/gate/grants/closecall.toml
    """
    from closecall.api.team import set_up_team

    done = set_up_team(config, group=group, readers=readers)
    for line in done.changes:
        _print(safe_text(line))
    check = done.check
    _print(f"team set-up: {'sound' if check.ok else f'{len(check.problems)} problem(s) left'}")
    _print_problems(check)
    if not check.ok:
        raise typer.Exit(1)


def ledger_anchor(
    out: Path | None = typer.Option(
        None, "--out", help="The anchor file (default: [team] anchor of the config)."
    ),
    as_json: bool = JsonOption,
    config: Path = ConfigOption,
) -> None:
    """Verify the ledger and write its head (entry number and hash) to the anchor file.

    Keep the anchor file where the reviewers cannot write (a folder only the supervisor can
    write, [team] anchor in the config): from then on `closecall ledger verify` checks that the
    chain still holds that entry, so a deleted, emptied or replaced ledger fails. Run it daily
    (cron) as the supervisor.

    \b
    Example:
      closecall ledger anchor --config /srv/grants/closecall.toml
    """
    from closecall.api.study import Ledger

    anchored = Ledger.open(config).anchor(out)
    if as_json:
        emit_json(anchored.to_dict())
        return
    _print(f"anchored entry {anchored.seq} in {safe_text(str(anchored.path))}")
    _print(f"head {anchored.seq} {anchored.hash}")


def register_ledger_anchor(ledger_app: typer.Typer) -> None:
    """Add `ledger anchor` to the `ledger` group."""
    ledger_app.command("anchor")(ledger_anchor)
