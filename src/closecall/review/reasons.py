"""Reason codes a reviewer gives for a decision: the study's list, and what the defaults mean."""

from __future__ import annotations

from typing import Any

from closecall.setup.config import DEFAULT_REASONS, StudyConfig

#: What each default code is for (a study's own codes carry no description).
DEFAULT_MEANINGS = {
    "information-not-in-model": "the case file holds facts the model's features do not",
    "data-error": "a feature value used by the model is wrong for this case",
    "hardship-or-circumstance": "a circumstance of the person the rules allow weighing",
    "model-limitation": "the model is known to misjudge cases like this one",
    "policy-exception": "a written policy exception applies",
    "other": "none of the above; the note says why",
}


def reason_codes(config: StudyConfig | None) -> list[dict[str, Any]]:
    """The reason codes a reviewer may give, in the config's order (the defaults without one).

    Each is ``{"code", "meaning", "default"}``; ``meaning`` is None for a study's own code.
    """
    codes = config.review.reasons if config is not None else DEFAULT_REASONS
    return [
        {"code": c, "meaning": DEFAULT_MEANINGS.get(c), "default": c in DEFAULT_MEANINGS}
        for c in codes
    ]
