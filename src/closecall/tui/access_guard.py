"""A login that may not record (an analyst, an unlisted login) gets a message, never the
decision dialog (docs/team.md)."""

from __future__ import annotations

from typing import Any

from closecall.api.study import Ledger
from closecall.core.text import safe_text


def may_decide(screen: Any) -> bool:
    """True when the session's login may record; otherwise say why on ``screen`` and refuse.

    ``screen`` is a review screen with a ``session`` (and, on the case screen, ``say``).
    """
    session = screen.session
    ledger = Ledger(session.config)
    if ledger.may_record(session.login):
        return True
    message = safe_text(ledger.refusal(session.login))
    say = getattr(screen, "say", None)
    if callable(say):
        say(message)
    screen.notify(message, severity="warning", timeout=10, markup=False)
    return False
