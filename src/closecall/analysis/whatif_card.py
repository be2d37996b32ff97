"""What-if policies on the deployed scorecard: its points with chosen weights set to zero.

The card scores the raw values of the cases under review and of the history (it was not fitted
to this history, so its scores of the history are held-out already). At its own cut-off a case
is decided favourably iff its points (dropped features at 0) reach the cut-off; under a cost
lens or a per-group threshold, the card's probability — its own points-to-odds scaling, or
the logistic recalibration on the history when it has none (docs/scorecard.md) — is compared
with the threshold.
"""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING, Any

import numpy as np
from scipy.special import logit

from closecall.analysis.whatif_policy import Policy, PolicyScores
from closecall.core.errors import Fix, UserError

if TYPE_CHECKING:
    import pandas as pd

    from closecall.suite.opening import OpenedStudy

_FRAMES: dict[str, tuple[pd.DataFrame, pd.DataFrame]] = {}  # snapshot id -> (cases, history)


def study_frames(study: OpenedStudy) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The raw values of the cases under review and of the history, in the snapshot's row
    order (read once per snapshot)."""
    sid = str(study.snapshot.id)
    if sid not in _FRAMES:
        from closecall.setup.load import load_study_data

        data = load_study_data(study.config)
        cases = data.history if data.pending is None else data.pending
        _FRAMES.clear()  # one study's frames at a time
        _FRAMES[sid] = (cases, data.history)
    return _FRAMES[sid]


def _check_drop(card: Any, drop: tuple[str, ...]) -> None:
    known = tuple(str(f) for f in card.features)
    for feature in drop:
        if feature not in known:
            raise UserError(
                f"the deployed scorecard ({card.source}) gives no points for '{feature}', so "
                "its weight cannot be set to zero",
                Fix("drop", allowed=known),
                about="drop",
            )


def card_policy_scores(study: OpenedStudy, card: Any, policy: Policy) -> PolicyScores:
    """The margins of a policy on the deployed scorecard (``policy.model`` is ``deployed``)."""
    from closecall.suite.scorecard import absolute_logodds, card_points

    _check_drop(card, policy.drop)
    snap = study.snapshot
    cases, history = study_frames(study)
    p_cases = card_points(card, cases, policy.drop)
    p_hist = card_points(card, history, policy.drop)
    y = np.asarray(snap.hist_y)
    if policy.lens is None and not policy.group_thresholds:
        factor = float(card.factor) if card.factor else 1.0  # a positive scale keeps the sign
        margin = (p_cases - card.cutoff) / factor
        held = (p_hist - card.cutoff) / factor
        at_zero = True
        rule = "its own cut-off"
    else:
        if card.offset is None or card.factor is None:
            raise UserError(
                f"the deployed scorecard ({card.source}) has no probability scale, so a cost "
                "lens or a group threshold cannot be applied to it",
                Fix("lens", hint="give the card its points-to-odds scaling (docs/scorecard.md)"),
                about="lens",
            )
        lens_t = float(snap.lens(policy.lens).threshold)
        cuts = np.full(len(snap.group_levels), float(logit(lens_t)))
        for level, t in policy.group_thresholds:
            cuts[snap.group_levels.index(level)] = float(logit(t))
        margin = absolute_logodds(card, p_cases) - cuts[np.asarray(snap.group_codes)]
        held = absolute_logodds(card, p_hist) - cuts[np.asarray(snap.hist_group_codes)]
        at_zero = False
        rule = "the probability thresholds"
    held = np.where(y >= 0, held, np.nan)
    notes = [f"the deployed scorecard decides at {rule}; its points are scored afresh"]
    if card.scaling == "recalibrated" and policy.lens is not None:
        notes.append(
            "the card's probabilities come from a logistic recalibration on this history, so "
            "its error rates under a lens are not fully held-out"
        )
    shown = replace(policy, drop=tuple(policy.drop))
    return PolicyScores(
        shown,
        shown.label(),
        np.asarray(margin, dtype=float),
        np.asarray(held, dtype=float),
        "the scorecard's points on the history (not fitted to it)",
        tuple(notes),
        at_zero_favourable=at_zero,
    )
