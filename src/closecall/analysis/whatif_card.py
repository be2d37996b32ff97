"""What-if policies on the deployed scorecard: its points with chosen weights set to zero.

The snapshot keeps each case's points per card feature (closecall.suite.scorecard_study), for
the cases under review and for the history; a policy that drops features adds up the other
features' points and the intercept (one matrix-vector product, no reading of the data). At its
own cut-off a case is decided favourably iff its points reach the cut-off (the card's rule);
under a cost lens or a per-group threshold the card's probability — from its own points-to-odds
scaling, or from the logistic recalibration on the history when it has none
(docs/scorecard.md) — is compared with the threshold.

The card was not fitted to the history, so its points there are held-out; its decisions at the
cut-off are too. Under a lens, the undropped card's history scores are the snapshot's
cross-fitted ones; with weights dropped they use the whole-history recalibration (a note says
so).
"""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING, Any

import numpy as np
from scipy.special import logit

from closecall.analysis.whatif_policy import Policy, PolicyScores
from closecall.core.errors import Fix, UserError

if TYPE_CHECKING:
    from closecall.suite.opening import OpenedStudy

POINTS = "card__points"
HIST_POINTS = "card__hist_points"


def _check_drop(card: Any, drop: tuple[str, ...]) -> None:
    known = tuple(str(f) for f in card.features)
    for feature in drop:
        if feature not in known:
            raise UserError(
                f"the deployed scorecard ({card.source.name}) gives no points for '{feature}', "
                "so its weight cannot be set to zero",
                Fix("drop", allowed=known),
                about="drop",
            )


def card_totals(
    study: OpenedStudy, card: Any, drop: tuple[str, ...]
) -> tuple[np.ndarray, np.ndarray | None]:
    """(points of every case under review, points of every history case or None when the
    history lacks the card's columns), with the ``drop`` features' points at zero."""
    snap = study.snapshot
    keep = np.array([f not in drop for f in card.features], dtype=float)
    M = np.asarray(snap.arrays[POINTS], dtype=float)
    cases = card.intercept + M @ keep
    if HIST_POINTS in snap.arrays:
        H: np.ndarray | None = np.asarray(snap.arrays[HIST_POINTS], dtype=float)
    elif snap.cross_fitted:
        H = M  # the cases under review are the history
    else:
        H = None
    return cases, (None if H is None else card.intercept + H @ keep)


def card_policy_scores(study: OpenedStudy, card: Any, policy: Policy) -> PolicyScores:
    """The margins of a policy on the deployed scorecard (``policy.model`` is ``deployed``)."""
    from closecall.suite.scorecard import absolute_logodds

    _check_drop(card, policy.drop)
    snap = study.snapshot
    p_cases, p_hist = card_totals(study, card, policy.drop)
    n_hist = len(snap.hist_y)
    notes: list[str] = []
    if policy.lens is None and not policy.group_thresholds:
        scale = float(card.factor) if card.factor else 1.0  # positive: keeps the sign
        margin = (p_cases - card.cutoff) / scale
        held = np.full(n_hist, np.nan) if p_hist is None else (p_hist - card.cutoff) / scale
        if not card.factor:
            notes.append("the card has no log-odds scale: its margins are in points")
        at_zero = True
    else:
        if card.offset is None or card.factor is None:
            raise UserError(
                f"the deployed scorecard ({card.source.name}) has no probability scale, so a "
                "cost lens or a group threshold cannot be applied to it",
                "give the card its points-to-odds scaling (pdo and an anchor; docs/scorecard.md)",
                about="lens",
            )
        lens_t = float(snap.lens(policy.lens).threshold)
        cuts = np.full(len(snap.group_levels), float(logit(lens_t)))
        for level, t in policy.group_thresholds:
            cuts[snap.group_levels.index(level)] = float(logit(t))
        margin = absolute_logodds(card, p_cases) - cuts[np.asarray(snap.group_codes)]
        hist_cut = cuts[np.asarray(snap.hist_group_codes)]
        if not policy.drop and "oof__deployed" in snap.arrays:
            held = np.asarray(snap.arrays["oof__deployed"], dtype=float) - hist_cut
        elif p_hist is None:
            held = np.full(n_hist, np.nan)
        else:
            held = absolute_logodds(card, p_hist) - hist_cut
            if card.scaling == "recalibrated":
                notes.append(
                    "with weights dropped, the card's history probabilities use its "
                    "recalibration on the whole history: its error rates under a lens or group "
                    "threshold are not fully held-out"
                )
        at_zero = False
    source = "the scorecard's points on the history (the card is not fitted to it)"
    if not np.isfinite(held).any():
        source = ""
        notes.append(
            "the history lacks the card's columns: the card's error rates on the history "
            "cannot be computed"
        )
    shown = replace(policy, drop=tuple(policy.drop))
    return PolicyScores(
        shown,
        shown.label() if policy.lens or policy.group_thresholds else _cutoff_label(shown),
        np.asarray(margin, dtype=float),
        np.asarray(held, dtype=float),
        source,
        tuple(notes),
        at_zero_favourable=at_zero,
    )


def _cutoff_label(policy: Policy) -> str:
    return policy.label().replace("deployed", "deployed scorecard at its cut-off", 1)
