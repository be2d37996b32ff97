"""`closecall keys init|show` (an author's signing key) and `closecall team check|setup`
(the study folder set up for a team): docs/team.md."""

from __future__ import annotations

from dataclasses import asdict
from pathlib import Path

import typer

from closecall.cli.common import ConfigOption, JsonOption
from closecall.cli.output import console, emit_json
from closecall.core.text import safe_text

keys_app = typer.Typer(
    help="Your signing key: every entry you record carries your signature.\n\n\b\n"
    "Example:\n  closecall keys init",
    no_args_is_help=True,
)


def _print(text: str) -> None:
    console.print(text, markup=False, highlight=False, soft_wrap=True)


def _registration(login: str, public: str) -> str:
    return f'{login} = "{public}"'


def _key_name(config: Path) -> tuple[str, str]:
    """The name an author's key is registered under, and why that name (a short note).

    A study whose ledger is in PostgreSQL records as the database session user, so its key is
    registered under that name (connecting once to ask the server); a ledger file records
    as the OS login, which is also the answer when there is no study config here at all.
    """
    from closecall.review.ledger.access import current_login, ledger_login
    from closecall.review.ledger.backend import is_database
    from closecall.setup.config import CONFIG_NAME, load_config

    found = config / CONFIG_NAME if config.is_dir() else config
    if not found.exists() and config == Path(CONFIG_NAME):
        return current_login(), (
            "your OS login; for a study whose ledger is in PostgreSQL the key is registered "
            "under your database user instead: run 'closecall keys show --config STUDY'"
        )
    review = load_config(config).review
    if is_database(review.ledger):
        return ledger_login(review), (
            "your database user: the study's ledger is in PostgreSQL, whose entries name the "
            "database session user"
        )
    return current_login(), "your OS login: the study's ledger is a file"


def _print_registration(login: str, why: str, public: str) -> None:
    _print("ask the study owner to add this line under [team.keys] of the study config:")
    _print(_registration(safe_text(login), public))
    _print(f"({safe_text(login)} is {why})")


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
    from closecall.review.ledger.signing import create_key

    login, why = _key_name(config)  # before the key is made: a refusal leaves nothing
    private, public = create_key()
    if as_json:
        emit_json(
            {"login": login, "name_is": why, "private_key": str(private), "public_key": public}
        )
        return
    _print(f"private key written to {safe_text(str(private))} (mode 600: keep it to yourself)")
    _print_registration(login, why, public)


@keys_app.command("show")
def keys_show(as_json: bool = JsonOption, config: Path = ConfigOption) -> None:
    """Print your public key as the line to register under [team.keys].

    The line names you as the study's ledger knows you: your OS login for a ledger file, your
    database user for a ledger in PostgreSQL.

    \b
    Example:
      closecall keys show --config closecall.toml
    """
    from closecall.core.errors import UserError
    from closecall.review.ledger.signing import key_folder, load_private, public_text

    key = load_private()
    if key is None:
        raise UserError(
            f"no signing key in {key_folder()} for this account", "run 'closecall keys init'"
        )
    public = public_text(key.public_key())
    login, why = _key_name(config)
    if as_json:
        emit_json({"login": login, "name_is": why, "public_key": public})
        return
    _print_registration(login, why, public)


def register(app: typer.Typer) -> None:
    """Add the `keys` and `team` groups to the closecall app."""
    app.add_typer(keys_app, name="keys")
    app.add_typer(team_app, name="team")


team_app = typer.Typer(
    help="Is the study folder set up for a team on one server? (docs/team.md)\n\n\b\n"
    "Example:\n  closecall team check",
    no_args_is_help=True,
)


@team_app.command("check")
def team_check(as_json: bool = JsonOption, config: Path = ConfigOption) -> None:
    """List what is wrong with the study folder's group and modes, its files, the config's
    owner and mode and the reviewer/analyst lists, each with the command that fixes it.

    Exit code 0 when nothing is wrong, 1 when something is.

    \b
    Example:
      closecall team check --config /srv/grants/closecall.toml
    """
    from closecall.review.team import check_team
    from closecall.setup.config import load_config

    problems = check_team(load_config(config))
    if as_json:
        emit_json({"ok": not problems, "problems": [asdict(p) for p in problems]})
    elif not problems:
        _print("team set-up: sound (nothing to fix)")
    else:
        _print(f"team set-up: {len(problems)} problem(s)")
        for p in problems:
            _print(f"  {safe_text(p.where)}: {safe_text(p.message)}")
            _print(f"    fix: {safe_text(p.fix)}")
    if problems:
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
    from closecall.core.errors import UserError
    from closecall.review.team import check_team, setup_team
    from closecall.setup.config import load_config

    cfg = load_config(config)
    try:
        done = setup_team(cfg, group, readers)
    except KeyError as exc:
        missing = exc.args[0] if exc.args else group
        raise UserError(f"no group {missing} on this server", "sudo groupadd NAME first") from None
    for line in done:
        _print(safe_text(line))
    problems = check_team(cfg)
    _print(f"team set-up: {'sound' if not problems else f'{len(problems)} problem(s) left'}")
    for p in problems:
        _print(f"  {safe_text(p.where)}: {safe_text(p.message)}")
        _print(f"    fix: {safe_text(p.fix)}")
    if problems:
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
    from closecall.review.decisions import anchor_ledger
    from closecall.setup.config import load_config

    path, result = anchor_ledger(load_config(config), out)
    if as_json:
        emit_json({"anchor": str(path), "seq": result.head_seq, "hash": result.head_hash})
        return
    _print(f"anchored entry {result.head_seq} in {safe_text(str(path))}")
    _print(f"head {result.head_seq} {result.head_hash}")


def register_ledger_anchor(ledger_app: typer.Typer) -> None:
    """Add `ledger anchor` to the `ledger` group."""
    ledger_app.command("anchor")(ledger_anchor)
