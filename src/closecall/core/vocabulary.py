"""The project's words, defined once: actions, decisions, review states, models, lenses.

Every layer imports them from here (the ledger, the queue, the reports, both views); nothing
else spells an action, a state code or a model's short name.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import pandas as pd

# --------------------------------------------------------------------------- decisions

FAVOURABLE = "favourable"
UNFAVOURABLE = "unfavourable"
DECISIONS = (FAVOURABLE, UNFAVOURABLE)


def decision_word(favourable: bool) -> str:
    """``favourable`` or ``unfavourable``."""
    return FAVOURABLE if favourable else UNFAVOURABLE


# --------------------------------------------------------------------------- actions

UPHOLD = "uphold"
OVERRIDE_FAVOURABLE = "override-favourable"
OVERRIDE_UNFAVOURABLE = "override-unfavourable"
DEFER = "defer"
#: What a reviewer may record for a case, in this order (state codes follow it).
ACTIONS = (UPHOLD, OVERRIDE_FAVOURABLE, OVERRIDE_UNFAVOURABLE, DEFER)
#: The actions that change the model's decision (a note is required).
OVERRIDES = (OVERRIDE_FAVOURABLE, OVERRIDE_UNFAVOURABLE)


def final_decision(reference_decision: str, action: str) -> str | None:
    """The decision that stands after ``action`` on a case the reference model decided
    ``reference_decision`` (None for a deferral): the one effective-decision rule.

    Examples
    --------
    >>> final_decision("unfavourable", "uphold"), final_decision("unfavourable", "defer")
    ('unfavourable', None)
    >>> final_decision("unfavourable", "override-favourable")
    'favourable'
    """
    if action == UPHOLD:
        return reference_decision
    if action == OVERRIDE_FAVOURABLE:
        return FAVOURABLE
    if action == OVERRIDE_UNFAVOURABLE:
        return UNFAVOURABLE
    if action == DEFER:
        return None
    raise ValueError(f"unknown action {action!r}")


def final_decisions(model_decision: pd.Series, action: pd.Series) -> pd.Series:
    """:func:`final_decision` for whole columns (a missing value for each deferral)."""
    import pandas as pd

    out = pd.Series(pd.NA, index=model_decision.index, dtype="object")
    out[action == UPHOLD] = model_decision[action == UPHOLD]
    out[action == OVERRIDE_FAVOURABLE] = FAVOURABLE
    out[action == OVERRIDE_UNFAVOURABLE] = UNFAVOURABLE
    return out


# --------------------------------------------------------------------------- review states

#: Review state of a case, by code: 0 not reviewed, then 1 + the index of the action in force
#: in :data:`ACTIONS`, and the last code when reviewers' decisions in force disagree.
STATE_NAMES = ("open", *ACTIONS, "conflict")
OPEN, UPHELD, TO_FAVOURABLE, TO_UNFAVOURABLE, DEFERRED, CONFLICT = range(len(STATE_NAMES))
#: The state code each action leaves.
STATE_OF_ACTION = {action: 1 + i for i, action in enumerate(ACTIONS)}

# --------------------------------------------------------------------------- models and lenses

#: The models of the suite, in display order.
MODEL_NAMES = ("pooled", "unaware", "proxy_free", "split", "deployed")
#: The models closecall fits itself (``deployed`` is read from the study's scores).
FITTED_MODELS = ("pooled", "unaware", "proxy_free", "split")
#: Each model's one short name for narrow columns (the same in every view).
SHORT_MODEL = {
    "pooled": "pooled",
    "unaware": "unaware",
    "proxy_free": "proxy-free",
    "split": "split",
    "deployed": "deployed",
}
#: Each standard model's one letter (N: no proxies; kept for narrow legends).
MODEL_LETTER = {"pooled": "P", "unaware": "U", "proxy_free": "N", "split": "S", "deployed": "D"}


def short_model(name: str) -> str:
    """A model's short name (its own name when it has none)."""
    return SHORT_MODEL.get(name, name)


def model_letters(names: Sequence[str]) -> dict[str, str]:
    """One distinct capital letter per model (P U N S D for the standard suite)."""
    out: dict[str, str] = {}
    used: set[str] = set()
    for name in names:
        candidates = [MODEL_LETTER.get(name, "")] + [c.upper() for c in name if c.isalnum()]
        candidates += [chr(c) for c in range(ord("A"), ord("Z") + 1)]
        letter = next(c for c in candidates if c and c not in used)
        used.add(letter)
        out[name] = letter
    return out


def model_at_lens(model: str, lens: str) -> str:
    """The name of one model's decision under one cost lens: ``pooled@default``."""
    return f"{model}@{lens}"
