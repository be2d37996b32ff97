"""What-if policies: a changed decision rule, and the decisions it would change.

A :class:`Policy` is one decision rule over the cases under review:

- a **model** of the suite (``pooled``, ``unaware``, ``proxy_free``, ``split``) or the
  ``deployed`` model (its imported scores or its scorecard);
- under a **cost lens** (its threshold t), or, for a deployed scorecard with no lens named,
  the card's own cut-off;
- with chosen features' **weights set to zero** (``drop``: the deployed scorecard only, whose
  points are the weights the agency published);
- with a **per-group threshold** for some group levels (a probability: the favourable decision
  when the model's probability exceeds it; the other groups keep the lens's threshold).

A field left out takes the baseline's value. The *baseline* is the decision in force: the
deployed model at its cut-off or under the operative (first) lens, or, when the study has no
deployed model, the reference model under the operative lens. Another policy can stand in as
the baseline, so two policies are compared side by side (its left-out fields are the
baseline's too).

A policy's *margins* are in log-odds (> 0: the favourable decision), for the cases under
review and, where the model has them, for the history cases on held-out scores (out-of-fold
scores of the suite's models; a scorecard is not fitted to the history, so its scores of the
history are held-out already). Everything here is vectorised over the cases.

A policy has a text form, ``model=unaware;lens=cautious;drop=heritage;threshold=Briar=0.45``
(items in any order, separated by ``;``), which the queue's ``changed_by`` filter takes.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace
from typing import TYPE_CHECKING

import numpy as np
from scipy.special import logit

from closecall.analysis.whatif_policy import (
    POLICY_KEYS,
    Policy,
    PolicyScores,
    in_policy_text,
    parse_group_threshold,
)
from closecall.core.errors import Fix, UserError
from closecall.core.vocabulary import MODEL_NAMES

if TYPE_CHECKING:
    from closecall.suite.opening import OpenedStudy
    from closecall.suite.scorecard import Scorecard
    from closecall.suite.snapshot import Snapshot

DEPLOYED = "deployed"


def baseline_model(snap: Snapshot) -> str:
    """The model whose decision is in force: ``deployed`` when the study has one, else the
    reference model."""
    return DEPLOYED if DEPLOYED in snap.model_names else snap.reference


def _card(study: OpenedStudy) -> Scorecard | None:
    """The deployed scorecard of the study, when one is configured (None otherwise)."""
    from closecall.suite.scorecard_study import deployed_card

    return deployed_card(study)


def _check_model(snap: Snapshot, model: str) -> None:
    if model not in snap.model_names:
        known = [m for m in MODEL_NAMES if m in snap.model_names]
        hint = None
        if model == DEPLOYED:
            hint = (
                "this study has no deployed model: name its scores (deployed_score under "
                "[data]) or its scorecard in closecall.toml (docs/config.md)"
            )
        raise UserError(
            f"no model named '{model}' in this study's suite",
            Fix("model", allowed=tuple(known), hint=hint),
            about="model",
        )


def _check_lens(snap: Snapshot, lens: str) -> float:
    names = [x.name for x in snap.lenses]
    if lens not in names:
        raise UserError(
            f"no cost lens named '{lens}' in this study",
            Fix("lens", allowed=tuple(names)),
            about="lens",
        )
    return float(snap.lens(lens).threshold)


def _check_levels(snap: Snapshot, policy: Policy) -> None:
    levels = snap.group_levels
    for level, _ in policy.group_thresholds:
        if level not in levels:
            raise UserError(
                f"no group level '{level}' in this study (its levels: {', '.join(levels)})",
                Fix(
                    "group_threshold",
                    allowed=tuple(f"{lv}=P" for lv in levels),
                    example=f"{levels[0]}=0.5",
                ),
                about="group_threshold",
            )


def _per_case_cut(
    codes: np.ndarray, levels: Sequence[str], lens_t: float, policy: Policy
) -> np.ndarray:
    """logit of the threshold each case is held to: its group's, or the lens's."""
    cuts = np.full(len(levels), float(logit(lens_t)))
    for level, t in policy.group_thresholds:
        cuts[list(levels).index(level)] = float(logit(t))
    return cuts[np.asarray(codes, dtype=np.int64)]


def resolve(study: OpenedStudy, policy: Policy) -> Policy:
    """``policy`` with its model filled in (the baseline's when left out); UserError for a
    model, lens or group level the study lacks."""
    snap = study.snapshot
    model = baseline_model(snap) if policy.model is None else policy.model
    full = replace(policy, model=model)
    _check_model(snap, str(full.model))
    if full.lens is not None:
        _check_lens(snap, full.lens)
    _check_levels(snap, full)
    return full


def policy_scores(study: OpenedStudy, policy: Policy) -> PolicyScores:
    """The margins of a policy for the cases under review and the held-out history.

    Parameters
    ----------
    study
        The opened study.
    policy
        The policy (a field left out is the baseline's: the model in force, the card's cut-off
        or the operative lens, no weight dropped, no group threshold).

    Raises
    ------
    UserError
        An unknown model, lens, group level or feature; dropped weights on a model that has no
        scorecard.
    """
    snap = study.snapshot
    full = resolve(study, policy)
    model = str(full.model)
    card = _card(study) if model == DEPLOYED else None
    if full.drop and card is None:
        what = (
            "the deployed model is imported as scores, which have no weights"
            if model == DEPLOYED
            else f"the {model} model is fitted by closecall; only the deployed scorecard's "
            "weights can be set to zero"
        )
        if DEPLOYED not in snap.model_names:
            what = "this study has no deployed model, so there are no deployed weights"
        raise UserError(
            f"cannot set the weight of {', '.join(full.drop)} to zero: {what}",
            "name the deployed model's scorecard under [deployed] scorecard in closecall.toml "
            "(docs/scorecard.md), or weigh another model of the suite instead",
            about="drop",
        )
    if card is not None:
        from closecall.analysis.whatif_card import card_policy_scores

        return card_policy_scores(study, card, full)
    lens_t = float(snap.lens(full.lens).threshold)
    notes: list[str] = []
    eta = np.asarray(snap.logit(model), dtype=float)
    margin = eta - _per_case_cut(snap.group_codes, snap.group_levels, lens_t, full)
    oof = np.asarray(snap.arrays.get(f"oof__{model}", np.full(len(snap.hist_y), np.nan)))
    held = oof - _per_case_cut(snap.hist_group_codes, snap.group_levels, lens_t, full)
    source = "" if not np.isfinite(held).any() else "out-of-fold scores of the history"
    if model == DEPLOYED and not source:
        notes.append(
            "the deployed model's scores are imported for the cases under review only: its "
            "error rates on the history cannot be computed"
        )
    elif model == DEPLOYED:
        source = "the deployed model's imported scores of the history"
        notes.append(
            "the deployed model's scores of the history are imported: whether that model was "
            "fitted to these cases is not known here, so its error rates may not be held-out"
        )
    shown = replace(full, lens=full.lens or snap.lenses[0].name)
    return PolicyScores(shown, shown.label(), margin, held, source, tuple(notes))


def policy_choices(study: OpenedStudy) -> list[Policy]:
    """The policies worth weighing first, in order: the deployed scorecard with each of its
    features' weights set to zero (the group attribute's first), every other model of the
    suite, and the model in force under every other cost lens."""
    snap = study.snapshot
    model = baseline_model(snap)
    card = _card(study) if model == DEPLOYED else None
    out: list[Policy] = []
    if card is not None:
        group = set(snap.meta.get("group_columns", []))
        features = sorted(card.features, key=lambda f: f not in group)
        out += [Policy(drop=(f,)) for f in features]
    out += [Policy(model=m) for m in snap.model_names if m != model]
    first = None if card is not None else snap.lenses[0].name
    out += [Policy(lens=lens.name) for lens in snap.lenses if lens.name != first]
    return out


def policy_from_text(study: OpenedStudy, text: str) -> Policy:
    """A policy from its text form, checked against the study (its model, lens, group levels
    and dropped features); every refusal is about the text (field ``policy``)."""
    policy = Policy.parse(text)
    try:
        policy_scores(study, policy)
    except UserError as exc:
        raise in_policy_text(exc) from None
    return policy


def changed_rows(
    study: OpenedStudy, policy: Policy, against: Policy | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """(rows whose decision the policy changes, True where the change is to favourable),
    compared with ``against`` (None: the baseline)."""
    before = policy_scores(study, against or Policy()).favourable
    after = policy_scores(study, policy).favourable
    rows = np.flatnonzero(before != after)
    return rows, after[rows]


__all__ = [
    "POLICY_KEYS",
    "Policy",
    "PolicyScores",
    "baseline_model",
    "changed_rows",
    "parse_group_threshold",
    "policy_choices",
    "policy_from_text",
    "policy_scores",
    "resolve",
]
