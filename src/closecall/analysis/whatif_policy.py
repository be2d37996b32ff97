"""A what-if policy and its margins: the data types of closecall.analysis.whatif.

See :mod:`closecall.analysis.whatif` for what a policy means.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from closecall.core.errors import Fix, UserError

#: The keys of a policy's text form, in the order :meth:`Policy.to_text` writes them.
POLICY_KEYS = ("model", "lens", "drop", "threshold")


@dataclass(frozen=True)
class Policy:
    """A decision rule: a model, a lens, dropped weights and per-group thresholds.

    Parameters
    ----------
    model
        A model of the suite or ``deployed`` (None: the baseline's model).
    lens
        A cost lens's name (None: the baseline's: the card's cut-off or the operative lens).
    drop
        Features whose weights are set to zero (the deployed scorecard's points).
    group_thresholds
        (group level, probability threshold) pairs; other groups keep the lens's threshold.

    Examples
    --------
    >>> Policy.parse("drop=heritage;threshold=Briar=0.45").to_text()
    'drop=heritage;threshold=Briar=0.45'
    >>> Policy(model="unaware").label()
    'unaware'
    """

    model: str | None = None
    lens: str | None = None
    drop: tuple[str, ...] = ()
    group_thresholds: tuple[tuple[str, float], ...] = ()

    def __post_init__(self) -> None:
        for level, t in self.group_thresholds:
            ok = isinstance(t, (int, float)) and not isinstance(t, bool) and 0.0 < t < 1.0
            if not ok or not math.isfinite(float(t)):
                raise UserError(
                    f"the threshold for group level '{level}' is {t!r}; a threshold is a "
                    "probability strictly between 0 and 1",
                    Fix(
                        "group_threshold",
                        range="LEVEL=P with P strictly between 0 and 1",
                        example=f"{level}=0.45",
                    ),
                    about="group_threshold",
                )
        levels = [level for level, _ in self.group_thresholds]
        twice = sorted({x for x in levels if levels.count(x) > 1})
        if twice:
            raise UserError(
                f"group level '{twice[0]}' is given two thresholds",
                Fix("group_threshold", hint="give each group level one threshold"),
                about="group_threshold",
            )

    @property
    def is_baseline(self) -> bool:
        """True when every field is left to the baseline."""
        return self == Policy()

    def to_text(self) -> str:
        """The policy's text form (``;``-separated ``key=value`` items; empty: the baseline)."""
        items: list[str] = []
        if self.model is not None:
            items.append(f"model={self.model}")
        if self.lens is not None:
            items.append(f"lens={self.lens}")
        items += [f"drop={f}" for f in self.drop]
        items += [f"threshold={level}={t:g}" for level, t in self.group_thresholds]
        return ";".join(items)

    def label(self, baseline_model: str | None = None) -> str:
        """The policy in words, e.g. ``deployed without heritage, Briar at p > 0.45``."""
        model = self.model or baseline_model or "baseline"
        text = model if self.lens is None else f"{model}@{self.lens}"
        if self.drop:
            text += f" without {', '.join(self.drop)}"
        if self.group_thresholds:
            text += ", " + ", ".join(f"{lv} at p > {t:g}" for lv, t in self.group_thresholds)
        return text

    @classmethod
    def parse(cls, text: str) -> Policy:
        """A policy from its text form; UserError about the text (field ``policy``) naming the
        item, with the policy's own keys in the fix.

        Examples
        --------
        >>> Policy.parse("model=split; lens=cautious")
        Policy(model='split', lens='cautious', drop=(), group_thresholds=())
        """
        try:
            return cls._parse(text)
        except UserError as exc:
            raise in_policy_text(exc) from None

    @classmethod
    def _parse(cls, text: str) -> Policy:
        model: str | None = None
        lens: str | None = None
        drop: list[str] = []
        thresholds: list[tuple[str, float]] = []
        example = "drop=heritage;threshold=Briar=0.45"
        for raw in str(text).split(";"):
            item = raw.strip()
            if not item:
                continue
            key, sep, value = item.partition("=")
            key, value = key.strip(), value.strip()
            if not sep or key not in POLICY_KEYS or not value:
                raise UserError(
                    f"policy item '{item}' is not one of "
                    + ", ".join(k + "=…" for k in POLICY_KEYS),
                    Fix("policy", range="';'-separated items key=value", example=example),
                    about="policy",
                )
            if key == "model":
                model = value
            elif key == "lens":
                lens = value
            elif key == "drop":
                drop.append(value)
            else:
                thresholds.append(parse_group_threshold(value))
        return cls(model, lens, tuple(drop), tuple(thresholds))


def in_policy_text(exc: UserError) -> UserError:
    """A refusal of something inside a policy's text, made about the text (field ``policy``):
    the fix names the policy's keys (``threshold``, ``drop``…), not the fields."""
    if exc.about == "policy":
        return exc
    key = {"group_threshold": "threshold"}
    fix = exc.worded_fix(lambda field: key.get(field, field))
    return UserError(exc.problem, fix, about="policy")


def parse_group_threshold(text: str) -> tuple[str, float]:
    """``LEVEL=P`` as (level, probability); UserError when it is not that shape."""
    level, sep, value = str(text).rpartition("=")
    fix = Fix(
        "group_threshold", range="LEVEL=P with P strictly between 0 and 1", example="Briar=0.45"
    )
    if not sep or not level.strip():
        raise UserError(
            f"'{text}' is not a group threshold of the form LEVEL=P", fix, about="group_threshold"
        )
    try:
        t = float(value)
    except ValueError:
        raise UserError(
            f"the threshold '{value}' for group level '{level.strip()}' is not a number",
            fix,
            about="group_threshold",
        ) from None
    if not (math.isfinite(t) and 0.0 < t < 1.0):
        raise UserError(
            f"the threshold {value} for group level '{level.strip()}' is out of range: it is a "
            "probability strictly between 0 and 1",
            fix,
            about="group_threshold",
        )
    return level.strip(), t


@dataclass(frozen=True)
class PolicyScores:
    """A resolved policy's margins (log-odds, > 0 favourable).

    Attributes
    ----------
    policy
        The policy with every field filled in (model and, unless the card's cut-off, lens).
    label
        The policy in words.
    margin
        (n_cases,) margin of every case under review.
    held_out
        (n_history,) margin of every history case on held-out scores (NaN where none).
    held_out_source
        Where the history margins come from, in words (empty when there are none).
    notes
        What a reader should know about these margins.
    """

    policy: Policy
    label: str
    margin: np.ndarray
    held_out: np.ndarray
    held_out_source: str
    notes: tuple[str, ...]
    at_zero_favourable: bool = False  # a scorecard decides favourably at its cut-off itself

    @property
    def favourable(self) -> np.ndarray:
        """(n_cases,) True where the policy decides favourably."""
        return np.asarray(self.margin >= 0 if self.at_zero_favourable else self.margin > 0)

    @property
    def held_out_favourable(self) -> np.ndarray:
        """(n_history,) True where the policy decides a history case favourably (held-out)."""
        h = self.held_out
        return np.asarray(h >= 0 if self.at_zero_favourable else h > 0)
