"""Once outcomes are known: did the model or the final decisions err more for each group?"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from closecall.core.errors import Fix, UserError
from closecall.core.vocabulary import DECISIONS, FAVOURABLE
from closecall.reports.disparity.heldout import RateGap, rate_gap
from closecall.reports.disparity.intervals import proportion, wilson_interval
from closecall.reports.disparity.power import Detectable, detectable_split
from closecall.reports.disparity.table import check_reviews, group_order


@dataclass(frozen=True)
class ErrorRate:
    """k errors among n cases that could suffer that error, with a Wilson interval."""

    errors: int
    cases: int
    rate: float
    low: float
    high: float


@dataclass(frozen=True)
class McNemar:
    """Model against final decisions on the same cases: which was right more often?

    ``model_only`` cases the model decided correctly and the final decision did not;
    ``final_only`` the reverse. The exact test is the two-sided binomial test of
    model_only against model_only + final_only with probability one half.
    """

    both_right: int
    model_only: int
    final_only: int
    both_wrong: int
    p_value: float | None
    detectable: Detectable


def mcnemar_exact(model_right: np.ndarray, final_right: np.ndarray) -> McNemar:
    """McNemar's exact test on paired right/wrong indicators.

    References
    ----------
    Q. McNemar, "Note on the sampling error of the difference between correlated proportions
    or percentages", Psychometrika 12 (1947) 153-157 (the exact version: a binomial test on the
    discordant pairs).
    """
    m = np.asarray(model_right, dtype=bool)
    f = np.asarray(final_right, dtype=bool)
    b, c = int((m & ~f).sum()), int((~m & f).sum())
    p = None if b + c == 0 else float(min(1.0, 2.0 * stats.binom.cdf(min(b, c), b + c, 0.5)))
    return McNemar(int((m & f).sum()), b, c, int((~m & ~f).sum()), p, detectable_split(b + c))


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
    mcnemar: McNemar  # model against final, this group's cases
    # against the reference group (None for the reference itself)
    model_ff_gap: RateGap | None = None
    final_ff_gap: RateGap | None = None
    model_fu_gap: RateGap | None = None
    final_fu_gap: RateGap | None = None


@dataclass(frozen=True)
class ErrorComparison:
    """Per-group error rates of the model and of the final decisions."""

    rows: tuple[GroupErrors, ...]
    without_outcome: int
    level: float
    notes: tuple[str, ...]
    reference_group: str | None = None
    mcnemar_all: McNemar | None = None


def error_rates(reviews: pd.DataFrame, *, level: float = 0.95) -> ErrorComparison:
    """False-favourable and false-unfavourable rates per group, model versus final, their gaps
    to the reference group (the largest), and McNemar's exact test of model against final.

    ``reviews`` must carry an ``outcome`` column ("favourable", "unfavourable" or missing).
    Deferred reviews and reviews without an outcome are left out; how many is reported.

    References
    ----------
    M. Hardt, E. Price and N. Srebro, "Equality of opportunity in supervised learning",
    NeurIPS 2016 (error rates by group). E. B. Wilson, JASA 22 (1927) 209-212.
    Q. McNemar, Psychometrika 12 (1947) 153-157 (model against final on the same cases).
    """
    if "outcome" not in reviews.columns:
        raise UserError(
            "review table: no outcome column",
            Fix("outcomes", range="a file of known outcomes by case id", hint="joined first"),
        )
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
    model_fav = d["model_fav"].to_numpy()
    final_fav = d["final_fav"].to_numpy()
    g = d["group"].to_numpy()
    rows: list[GroupErrors] = []
    notes: list[str] = []
    ref = groups[0]

    def rate(k: int, n: int) -> ErrorRate:
        lo, hi = wilson_interval(k, n, level)
        return ErrorRate(k, n, float(proportion(k, n)), float(lo), float(hi))

    def counts(name: str) -> tuple[int, int, int, int, int, int]:
        m = g == name
        pos, neg = out_fav & m, ~out_fav & m
        return (
            int(pos.sum()),
            int(neg.sum()),
            int((model_fav & neg).sum()),
            int((final_fav & neg).sum()),
            int((~model_fav & pos).sum()),
            int((~final_fav & pos).sum()),
        )

    rp, rn, rmff, rfff, rmfu, rffu = counts(ref)
    for name in groups:  # loop over groups, not cases
        m = g == name
        npos, nneg, mff, fff, mfu, ffu = counts(name)
        other = name != ref
        rows.append(
            GroupErrors(
                group=name,
                with_outcome=int(m.sum()),
                outcome_favourable=npos,
                outcome_unfavourable=nneg,
                model_false_favourable=rate(mff, nneg),
                final_false_favourable=rate(fff, nneg),
                model_false_unfavourable=rate(mfu, npos),
                final_false_unfavourable=rate(ffu, npos),
                mcnemar=mcnemar_exact((model_fav == out_fav)[m], (final_fav == out_fav)[m]),
                model_ff_gap=rate_gap(mff, nneg, rmff, rn, level) if other else None,
                final_ff_gap=rate_gap(fff, nneg, rfff, rn, level) if other else None,
                model_fu_gap=rate_gap(mfu, npos, rmfu, rp, level) if other else None,
                final_fu_gap=rate_gap(ffu, npos, rffu, rp, level) if other else None,
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
        rows=tuple(rows),
        without_outcome=missing,
        level=level,
        notes=tuple(notes),
        reference_group=ref,
        mcnemar_all=mcnemar_exact(model_fav == out_fav, final_fav == out_fav),
    )
