"""`closecall ledger setup` and `closecall ledger migrate`: a team's ledger in PostgreSQL."""

from __future__ import annotations

import typer

from closecall.cli.output import console


def setup(
    url: str = typer.Argument(..., help="The ledger database: postgresql://HOST/DB (no password)."),
    reviewer_role: str = typer.Option(
        "closecall_reviewer", "--reviewer-role", help="Group role of those who record."
    ),
    analyst_role: str = typer.Option(
        "closecall_analyst", "--analyst-role", help="Group role of those who only read."
    ),
) -> None:
    """Prepare a PostgreSQL database for a team's ledger (run once, by its owner; idempotent).

    Creates the schema, the append-only guards and the two group roles; add members with
    GRANT closecall_reviewer TO alice.
    """
    from closecall.api.ledger_database import set_up_ledger_database

    ready = set_up_ledger_database(url, reviewer_role=reviewer_role, analyst_role=analyst_role)
    console.print(
        f"ledger ready in {ready.url}\n"
        f"  record: GRANT {ready.reviewer_role} TO <user>;   "
        f"read only: GRANT {ready.analyst_role} TO <user>;",
        markup=False,
        highlight=False,
    )


def migrate(
    source: str = typer.Option(..., "--from", help="The ledger to copy (an SQLite file)."),
    target: str = typer.Option(..., "--to", help="An empty, set-up ledger database URL."),
) -> None:
    """Copy every entry of a ledger into an empty PostgreSQL ledger; verify both sides."""
    from closecall.api.ledger_database import migrate_ledger
    from closecall.core.errors import UserError
    from closecall.review.ledger.pg_store import is_url

    if not is_url(target):  # worded with the flag, before any ledger is opened
        raise UserError(
            f"--to {target}: not a PostgreSQL URL", "give the target as postgresql://HOST/DB"
        )
    moved = migrate_ledger(source, target)
    console.print(
        f"copied {moved.copied} entries; both chains verify\n"
        f"  {moved.source}: head {moved.head_seq} {moved.head_hash}\n"
        f"  {moved.target}: head {moved.head_seq} {moved.head_hash}",
        markup=False,
        highlight=False,
    )


def register_ledger_team(ledger_app: typer.Typer) -> None:
    """Add `ledger setup` and `ledger migrate` to the ledger group."""
    ledger_app.command("setup")(setup)
    ledger_app.command("migrate")(migrate)
