"""How the review screens word the engine's errors: each engine field named as their control."""

from __future__ import annotations

from closecall.core.errors import UserError

#: What each engine field is on the review screens.
CONTROLS = {
    "action": "a decision in the list",
    "note": "a note in the note box",
    "reason": "a reason in the list",
}


def control(field: str) -> str:
    """The review screens' name of an engine field (the field itself when it has no control)."""
    return CONTROLS.get(field, field)


def fix_text(exc: UserError) -> str | None:
    """The fix of a user error, worded for the review screens (``choose a reason: …``)."""
    remedy = exc.remedy
    if remedy is None:
        return exc.fix
    if remedy.field == "reason" and remedy.allowed:
        text = f"choose a reason: {', '.join(remedy.allowed)}"
        return f"{text}; {remedy.hint}" if remedy.hint else text
    if remedy.field == "note":
        return "write a note below" + (f" ({remedy.hint})" if remedy.hint else "")
    if remedy.command:  # a step the screens do not take: the shell command, in plain words
        flag = f" --{remedy.field.replace('_', '-')}" if remedy.switch else ""
        config = f" --config {remedy.config}" if remedy.config else ""
        text = f"leave the review screen and run 'closecall {remedy.command}{flag}{config}'"
        return remedy.finish(text, lambda alt: alt.words(control))
    return exc.worded_fix(control)


def message_text(exc: UserError) -> str:
    """The message of a user error, its field named as the screens' control."""
    return exc.worded_message(control)
