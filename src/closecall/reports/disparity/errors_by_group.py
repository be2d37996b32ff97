"""Once outcomes are known: did the model or the final decisions err more for each group?"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

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
    df = _reviews_with_outcomes(reviews)
    known = df["decided"] & df["outcome"].notna()
    d = _KnownOutcomes.of(df[known])
    groups = group_order(df)
    ref = groups[0]
    ref_counts = d.counts(ref)
    rows = tuple(
        _group_errors(d, name, None if name == ref else ref_counts, level) for name in groups
    )
    missing = int((df["decided"] & df["outcome"].isna()).sum())
    return ErrorComparison(
        rows=rows,
        without_outcome=missing,
        level=level,
        notes=_notes(rows, missing, bool(known.any())),
        reference_group=ref,
        mcnemar_all=mcnemar_exact(d.model_right, d.final_right),
    )


def _reviews_with_outcomes(reviews: pd.DataFrame) -> pd.DataFrame:
    """The checked review table, refused without an outcome column or with an unknown outcome."""
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
    return df


class _Counts(NamedTuple):
    """One group's cases by outcome, and each kind of error of the model and of the final."""

    favourable: int
    unfavourable: int
    model_ff: int
    final_ff: int
    model_fu: int
    final_fu: int


@dataclass(frozen=True)
class _KnownOutcomes:
    """The decided reviews with a known outcome, as arrays (one entry per review)."""

    out_fav: np.ndarray
    model_fav: np.ndarray
    final_fav: np.ndarray
    group: np.ndarray

    @classmethod
    def of(cls, d: pd.DataFrame) -> _KnownOutcomes:
        """The arrays of a checked review table's decided rows with an outcome."""
        return cls(
            (d["outcome"] == FAVOURABLE).to_numpy(),
            d["model_fav"].to_numpy(),
            d["final_fav"].to_numpy(),
            d["group"].to_numpy(),
        )

    @property
    def model_right(self) -> np.ndarray:
        """Where the model's decision matches the outcome."""
        return np.asarray(self.model_fav == self.out_fav)

    @property
    def final_right(self) -> np.ndarray:
        """Where the final decision matches the outcome."""
        return np.asarray(self.final_fav == self.out_fav)

    def counts(self, name: str) -> _Counts:
        """One group's outcome counts and error counts."""
        m = self.group == name
        pos, neg = self.out_fav & m, ~self.out_fav & m
        return _Counts(
            int(pos.sum()),
            int(neg.sum()),
            int((self.model_fav & neg).sum()),
            int((self.final_fav & neg).sum()),
            int((~self.model_fav & pos).sum()),
            int((~self.final_fav & pos).sum()),
        )


def _rate(k: int, n: int, level: float) -> ErrorRate:
    """k errors among n cases, with a Wilson interval."""
    lo, hi = wilson_interval(k, n, level)
    return ErrorRate(k, n, float(proportion(k, n)), float(lo), float(hi))


def _group_errors(d: _KnownOutcomes, name: str, ref: _Counts | None, level: float) -> GroupErrors:
    """One group's error rates, its McNemar test and its gaps to the reference (None: is it)."""
    m = d.group == name
    c = d.counts(name)
    gaps = _gaps(c, ref, level)
    return GroupErrors(
        group=name,
        with_outcome=int(m.sum()),
        outcome_favourable=c.favourable,
        outcome_unfavourable=c.unfavourable,
        model_false_favourable=_rate(c.model_ff, c.unfavourable, level),
        final_false_favourable=_rate(c.final_ff, c.unfavourable, level),
        model_false_unfavourable=_rate(c.model_fu, c.favourable, level),
        final_false_unfavourable=_rate(c.final_fu, c.favourable, level),
        mcnemar=mcnemar_exact(d.model_right[m], d.final_right[m]),
        model_ff_gap=gaps[0],
        final_ff_gap=gaps[1],
        model_fu_gap=gaps[2],
        final_fu_gap=gaps[3],
    )


def _gaps(
    c: _Counts, ref: _Counts | None, level: float
) -> tuple[RateGap | None, RateGap | None, RateGap | None, RateGap | None]:
    """The four error rates' gaps to the reference group's (model and final, ff and fu)."""
    if ref is None:
        return None, None, None, None
    return (
        rate_gap(c.model_ff, c.unfavourable, ref.model_ff, ref.unfavourable, level),
        rate_gap(c.final_ff, c.unfavourable, ref.final_ff, ref.unfavourable, level),
        rate_gap(c.model_fu, c.favourable, ref.model_fu, ref.favourable, level),
        rate_gap(c.final_fu, c.favourable, ref.final_fu, ref.favourable, level),
    )


def _notes(rows: tuple[GroupErrors, ...], missing: int, any_known: bool) -> tuple[str, ...]:
    """What the rates leave out: groups with no outcome, decided reviews without one."""
    notes = [
        f"group {r.group}: no decided review has a known outcome"
        for r in rows
        if r.with_outcome == 0
    ]
    if missing:
        notes.append(f"{missing} decided review(s) have no known outcome and are left out")
    if not any_known:
        notes.append("no decided review has a known outcome: error rates cannot be computed")
    return tuple(notes)
