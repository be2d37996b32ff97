"""How the command line words the engine's errors: each engine field named as its flag."""

from __future__ import annotations

from pathlib import Path

from closecall.core.errors import Fix, UserError

#: The flag (or argument) that sets each engine field on the command line.
FLAGS = {
    "action": "--action",
    "allow_empty": "--allow-empty",
    "anchor": "--anchor",
    "band": "--band",
    "bias": "--bias",
    "biased_group": "--biased-group",
    "biased_reviewers": "--biased-reviewers",
    "cases": "--cases",
    "config": "--config",
    "drop": "--drop-weight",
    "epsilon": "--epsilon",
    "force": "--force",
    "group_threshold": "--group-threshold",
    "html": "--html",
    "key_file": "--pseudonymise",
    "limit": "--limit",
    "n": "N",
    "n_boot": "--boot",
    "no_notes": "--no-notes",
    "note": '--note "…"',
    "out": "--out",
    "outcomes": "--outcomes",
    "period": "--period",
    "policy": "--changed-by",
    "pseudonymise": "--pseudonymise KEYFILE",
    "pseudonymise_reviewers": "--pseudonymise-reviewers",
    "reason": "--reason",
    "refit": "--refit",
    "rests_on": "--rests-on",
    "reviewers": "--reviewers",
    "second_opinion": "--second-opinion",
    "seed": "--seed",
    "supersedes": "--supersedes",
}


#: Fields whose one value is a flag of its own (``notes=False`` is ``--no-notes``).
VALUE_FLAGS = {("notes", "False"): "--no-notes"}


def flag(field: str) -> str:
    """The command-line name of an engine field (the field itself when it has no flag)."""
    return FLAGS.get(field, field)


def fix_words(fix: Fix) -> str:
    """A structured fix worded for the command line: flags, and a step to run as its command
    (``run 'closecall fit --refit --config PATH'``, the config left out when it is the one in
    the current folder)."""
    own = VALUE_FLAGS.get((fix.field, fix.value or ""))
    if own is not None:
        return fix.finish(f"pass {own}", fix_words)
    if not fix.command:
        return fix.words(flag)
    args = ["closecall", fix.command] + ([flag(fix.field)] if fix.switch else [])
    if fix.config is not None:
        config = Path(fix.config)
        if not (config.name == "closecall.toml" and config.parent.resolve() == Path.cwd()):
            args += ["--config", fix.config]
    return fix.finish(f"run '{' '.join(args)}'", fix_words)


def error_lines(exc: UserError) -> tuple[str, str | None]:
    """(message, fix) of a user error, worded for the command line."""
    fix = fix_words(exc.remedy) if exc.remedy is not None else exc.fix
    return exc.worded_message(flag), fix
