"""How the command line words the engine's errors: each engine field named as its flag."""

from __future__ import annotations

from closecall.core.errors import UserError

#: The flag (or argument) that sets each engine field on the command line.
FLAGS = {
    "action": "--action",
    "anchor": "--anchor",
    "band": "--band",
    "bias": "--bias",
    "biased_group": "--biased-group",
    "biased_reviewers": "--biased-reviewers",
    "cases": "--cases",
    "epsilon": "--epsilon",
    "limit": "--limit",
    "n": "N",
    "n_boot": "--boot",
    "note": '--note "…"',
    "pseudonymise": "--pseudonymise KEYFILE",
    "pseudonymise_reviewers": "--pseudonymise-reviewers",
    "reason": "--reason",
    "rests_on": "--rests-on",
    "reviewers": "--reviewers",
    "seed": "--seed",
    "supersedes": "--supersedes",
}


def flag(field: str) -> str:
    """The command-line name of an engine field (the field itself when it has no flag)."""
    return FLAGS.get(field, field)


def error_lines(exc: UserError) -> tuple[str, str | None]:
    """(message, fix) of a user error, worded for the command line."""
    return exc.worded_message(flag), exc.worded_fix(flag)
