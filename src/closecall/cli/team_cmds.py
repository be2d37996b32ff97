"""`closecall keys init|show`: an author's signing key (docs/team.md)."""

from __future__ import annotations

import typer

from closecall.cli.common import JsonOption
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


@keys_app.command("init")
def keys_init(as_json: bool = JsonOption) -> None:
    """Make your Ed25519 key pair (once per account) and print the line to register.

    The private key is written readable by your account only (mode 0600) under
    ~/.config/closecall/keys/ (or the folder CLOSECALL_KEYS names); it is never overwritten.
    Give the printed line to the study owner, who adds it under [team.keys] of the config.

    \b
    Example:
      closecall keys init
    """
    from closecall.review.ledger.access import current_login
    from closecall.review.ledger.signing import create_key

    private, public = create_key()
    login = current_login()
    if as_json:
        emit_json({"login": login, "private_key": str(private), "public_key": public})
        return
    _print(f"private key written to {safe_text(str(private))} (mode 600: keep it to yourself)")
    _print("ask the study owner to add this line under [team.keys] of the study config:")
    _print(_registration(safe_text(login), public))


@keys_app.command("show")
def keys_show(as_json: bool = JsonOption) -> None:
    """Print your public key as the line to register under [team.keys].

    \b
    Example:
      closecall keys show
    """
    from closecall.core.errors import UserError
    from closecall.review.ledger.access import current_login
    from closecall.review.ledger.signing import key_folder, load_private, public_text

    key = load_private()
    if key is None:
        raise UserError(
            f"no signing key in {key_folder()} for this account", "run 'closecall keys init'"
        )
    public = public_text(key.public_key())
    login = current_login()
    if as_json:
        emit_json({"login": login, "public_key": public})
        return
    _print(_registration(safe_text(login), public))


def register(app: typer.Typer) -> None:
    """Add the `keys` group to the closecall app."""
    app.add_typer(keys_app, name="keys")
