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
    from closecall.review.ledger.pg_store import redact
    from closecall.review.ledger.pg_store import setup as pg_setup

    pg_setup(url, reviewer_role, analyst_role)
    console.print(
        f"ledger ready in {redact(url)}\n"
        f"  record: GRANT {reviewer_role} TO <user>;   read only: GRANT {analyst_role} TO <user>;",
        markup=False,
        highlight=False,
    )


def migrate(
    source: str = typer.Option(..., "--from", help="The ledger to copy (an SQLite file)."),
    target: str = typer.Option(..., "--to", help="An empty, set-up ledger database URL."),
) -> None:
    """Copy every entry of a ledger into an empty PostgreSQL ledger; verify both sides."""
    from closecall.core.errors import UserError
    from closecall.review.ledger.backend import open_any_ledger
    from closecall.review.ledger.pg_store import is_url, open_pg_ledger, redact
    from closecall.review.ledger.pg_store import migrate as pg_migrate

    if not is_url(target):
        raise UserError(
            f"--to {target}: not a PostgreSQL URL", "give the target as postgresql://HOST/DB"
        )
    with open_any_ledger(source, readonly=True) as ledger:
        before = ledger.verify()
        if not before.ok:
            assert before.problem is not None
            raise UserError(
                f"{source}: the source ledger does not verify ({before.problem.message})",
                "run 'closecall ledger verify' on it and restore it from a backup first",
            )
        pg_migrate(ledger, target)
    with open_pg_ledger(target, inspect=True) as copied:
        after = copied.verify()
    if not after.ok:
        assert after.problem is not None
        raise UserError(
            f"{redact(target)}: the copy does not verify ({after.problem.message})",
            "drop and set up the target database again, then migrate again",
        )
    console.print(
        f"copied {after.verified} entries; both chains verify\n"
        f"  {source}: head {before.head_seq} {before.head_hash}\n"
        f"  {redact(target)}: head {after.head_seq} {after.head_hash}",
        markup=False,
        highlight=False,
    )
    if (before.head_seq, before.head_hash) != (after.head_seq, after.head_hash):
        raise UserError("the head hashes differ", "tell the study's supervisor")


def register_ledger_team(ledger_app: typer.Typer) -> None:
    """Add `ledger setup` and `ledger migrate` to the ledger group."""
    ledger_app.command("setup")(setup)
    ledger_app.command("migrate")(migrate)
