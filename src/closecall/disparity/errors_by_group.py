"""Once outcomes are known: did the model or the final decisions err more for each group?"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from closecall.disparity.intervals import proportion, wilson_interval
from closecall.disparity.table import DECISIONS, FAVOURABLE, check_reviews, group_order
from closecall.errors import UserError


@dataclass(frozen=True)
class ErrorRate:
    """k errors among n cases that could suffer that error, with a Wilson interval."""

    errors: int
    cases: int
    rate: float
    low: float
    high: float


@dataclass(frozen=True)
class GroupErrors:
    """Error rates of one group, model and final, among decided reviews with a known outcome.

    False-favourable rate: share of cases whose outcome was unfavourable that were decided
    favourably. False-unfavourable rate: share of cases whose outcome was favourable that were
    decided unfavourably.
    """

    group: str
    with_outcome: int
    outcome_favourable: int
    outcome_unfavourable: int
    model_false_favourable: ErrorRate
    final_false_favourable: ErrorRate
    model_false_unfavourable: ErrorRate
    final_false_unfavourable: ErrorRate


@dataclass(frozen=True)
class ErrorComparison:
    """Per-group error rates of the model and of the final decisions."""

    rows: tuple[GroupErrors, ...]
    without_outcome: int
    level: float
    notes: tuple[str, ...]


def error_rates(reviews: pd.DataFrame, *, level: float = 0.95) -> ErrorComparison:
    """False-favourable and false-unfavourable rates per group, model versus final.

    ``reviews`` must carry an ``outcome`` column ("favourable", "unfavourable" or missing).
    Deferred reviews and reviews without an outcome are left out; how many is reported.

    References
    ----------
    M. Hardt, E. Price and N. Srebro, "Equality of opportunity in supervised learning",
    NeurIPS 2016 (error rates by group). E. B. Wilson, JASA 22 (1927) 209-212.
    """
    if "outcome" not in reviews.columns:
        raise UserError("review table: no outcome column", "join outcomes first (--outcomes FILE)")
    df = check_reviews(reviews)
    outcome = df["outcome"]
    bad = outcome.notna() & ~outcome.isin(DECISIONS)
    if bad.any():
        row = int(np.flatnonzero(bad.to_numpy())[0])
        raise UserError(
            f"review table: row {row + 1}: outcome {outcome.iloc[row]!r} is not favourable, "
            "unfavourable or empty"
        )
    groups = group_order(df)
    known = df["decided"] & outcome.notna()
    d = df[known]
    out_fav = (d["outcome"] == FAVOURABLE).to_numpy()
    g = d["group"].to_numpy()
    rows: list[GroupErrors] = []
    notes: list[str] = []
    for name in groups:  # loop over groups, not cases
        m = g == name
        pos, neg = out_fav & m, ~out_fav & m
        npos, nneg = int(pos.sum()), int(neg.sum())

        def rate(k: int, n: int) -> ErrorRate:
            lo, hi = wilson_interval(k, n, level)
            return ErrorRate(k, n, float(proportion(k, n)), float(lo), float(hi))

        rows.append(
            GroupErrors(
                group=name,
                with_outcome=int(m.sum()),
                outcome_favourable=npos,
                outcome_unfavourable=nneg,
                model_false_favourable=rate(int((d["model_fav"].to_numpy() & neg).sum()), nneg),
                final_false_favourable=rate(int((d["final_fav"].to_numpy() & neg).sum()), nneg),
                model_false_unfavourable=rate(int((~d["model_fav"].to_numpy() & pos).sum()), npos),
                final_false_unfavourable=rate(int((~d["final_fav"].to_numpy() & pos).sum()), npos),
            )
        )
        if m.sum() == 0:
            notes.append(f"group {name}: no decided review has a known outcome")
    missing = int((df["decided"] & outcome.isna()).sum())
    if missing:
        notes.append(f"{missing} decided review(s) have no known outcome and are left out")
    if not known.any():
        notes.append("no decided review has a known outcome: error rates cannot be computed")
    return ErrorComparison(
        rows=tuple(rows), without_outcome=missing, level=level, notes=tuple(notes)
    )
