"""The study's scorecard (``[deployed] scorecard``) as the suite's *deployed* model.

At fit time :func:`score_card` reads the card against the data, scores the cases under review
and the history, fits the card's log-odds scale on the history when the card gives none
(:func:`closecall.suite.scorecard.recalibrate`, cross-fitted by the study's folds for the held-out
metrics), and returns the deployed model's scores with the arrays and metadata the snapshot
keeps: each case's points per card feature (``card__points``; the history's in
``card__hist_points`` when the history is not the cases under review) and, under meta
``deployed_card``, the scaled card, the history mean of each feature's points (the baseline of
the contributions) and what could not be computed.

After fitting, :func:`deployed_card` returns the opened study's scaled card (or None).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from closecall.core.errors import UserError
from closecall.setup.config import StudyConfig
from closecall.setup.load import StudyData
from closecall.suite.scorecard import (
    Scorecard,
    absolute_logodds,
    card_contributions,
    load_scorecard,
    recalibrate,
    unseen_levels,
)

META_KEY = "deployed_card"
POINTS = "card__points"
HIST_POINTS = "card__hist_points"


@dataclass
class CardScores:
    """The card's results at fit time (see the module docstring)."""

    card: Scorecard  # scaled when the scale could be known
    logit: np.ndarray | None  # (n_scored,) ln(odds) of the favourable outcome; None: unknown
    oof_logit: np.ndarray  # (n_history,) held-out ln(odds) on the history (NaN: unknown)
    arrays: dict[str, np.ndarray]
    meta: dict[str, Any]
    notes: list[str] = field(default_factory=list)


def _unseen_notes(where: str, unseen: dict[str, dict[str, int]], card: Scorecard) -> list[str]:
    notes = []
    for feat, levels in unseen.items():
        other = any(r.level == "*" for r in card.rows_of(feat))
        how = "the card's '*' row" if other else "0 points (the card lists no '*' row)"
        shown = ", ".join(f"'{k}' ({v:,})" for k, v in list(levels.items())[:5])
        more = f" and {len(levels) - 5} more" if len(levels) > 5 else ""
        notes.append(
            f"scorecard: {where} has '{feat}' categories the card does not list: {shown}{more}; "
            f"scored with {how}"
        )
    return notes


def score_card(config: StudyConfig, data: StudyData, fold: np.ndarray) -> CardScores:
    """Read ``[deployed] scorecard`` and score the study with it (see the module docstring).

    Raises
    ------
    UserError
        Every problem of the card (closecall.suite.scorecard.load_scorecard) and of scoring
        the data with it (a value outside every bin, a missing value the card does not score).
    """
    path = config.deployed.scorecard
    assert path is not None
    cross_fitted = data.pending is None
    scored = data.history if data.pending is None else data.pending
    scored_path = config.data.history if data.pending is None else config.data.pending
    card = load_scorecard(path, [str(c) for c in scored.columns])
    notes: list[str] = []
    cannot: list[str] = []
    M, _ = card_contributions(card, scored, source=str(scored_path))
    arrays: dict[str, np.ndarray] = {POINTS: M}
    notes += _unseen_notes(
        str(scored_path.name if scored_path else ""), unseen_levels(card, scored), card
    )
    lacking = [f for f in card.features if f not in data.history.columns]
    y = data.y.astype(np.int64)
    oof = np.full(len(y), np.nan)
    if lacking:
        cannot.append(
            f"the history lacks the card's column(s) {', '.join(lacking)}: the card's held-out "
            "metrics against the recorded outcomes"
            + (" and its log-odds scale (the card gives no pdo)" if not card.scaled else "")
            + " cannot be computed; its contributions are centred on the cases under review"
        )
        means = M.mean(axis=0) if len(M) else np.zeros(len(card.features))
        baseline_source = "cases under review"
    else:
        if cross_fitted:
            H = M
        else:
            H, _ = card_contributions(card, data.history, source=str(config.data.history))
            arrays[HIST_POINTS] = H
            notes += _unseen_notes(
                config.data.history.name, unseen_levels(card, data.history), card
            )
        hist_points = H.sum(axis=1) + card.intercept
        means = H.mean(axis=0)
        baseline_source = "history"
        if card.factor is not None and card.offset is not None:
            oof = absolute_logodds(card, hist_points)
        else:
            for k in np.unique(fold):
                train = fold != k
                part = recalibrate(card, hist_points[train], y[train])
                oof[~train] = absolute_logodds(part, hist_points[~train])
            card = recalibrate(card, hist_points, y)
    total = M.sum(axis=1) + card.intercept
    logit = absolute_logodds(card, total) if card.offset is not None else None
    if logit is None and config.model.reference == "deployed":
        raise UserError(
            f"{config.path}: [model] reference = 'deployed', but the scorecard "
            f"{path.name} has no log-odds scale: it gives no pdo and the history lacks its "
            f"column(s) {', '.join(lacking)}, so it cannot be recalibrated",
            "give the card its scaling (pdo, anchor_points, anchor_odds; docs/scorecard.md), "
            "or set reference = 'pooled'",
        )
    if logit is None:
        cannot.append(
            "the card's probabilities and its decisions under the cost lenses cannot be "
            "computed (no anchor and no history to recalibrate on): only its own cut-off decides"
        )
    meta = {
        "card": card.to_json(),
        "mean_points": [float(v) for v in means],
        "baseline_source": baseline_source,
        "cannot": cannot,
        "notes": notes,
    }
    return CardScores(card, logit, oof, arrays, meta, notes + list(card.notes))


def card_meta(snapshot: Any) -> dict[str, Any] | None:
    """The snapshot's ``deployed_card`` metadata, or None when the study has no card."""
    meta = snapshot.meta.get(META_KEY)
    return meta if isinstance(meta, dict) else None


def deployed_card(opened: Any) -> Scorecard | None:
    """The opened study's card as fitted (scaled when its scale could be known), or None when
    ``[deployed] scorecard`` is not set.

    ``opened`` is a :class:`closecall.suite.opening.OpenedStudy`.
    """
    meta = card_meta(opened.snapshot)
    return None if meta is None else Scorecard.from_json(meta["card"])
