"""The whole disparity report: every figure, assembled into one typed result."""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any

import pandas as pd

from closecall.disparity.conditional import ConditionalFit, conditional_disparity
from closecall.disparity.errors_by_group import ErrorComparison, error_rates
from closecall.disparity.overrides import OverrideComparison, override_rates
from closecall.disparity.profile import MarginBin, override_by_margin
from closecall.disparity.rates import RateComparison, favourable_rates
from closecall.disparity.reviewers import SMALL_CELL, ReviewerTable, reviewer_tables
from closecall.disparity.table import check_reviews, group_order


@dataclass(frozen=True)
class ReviewSummary:
    """What the report rests on."""

    reviews: int  # effective reviews (one per case)
    decided: int
    deferred: int
    groups: tuple[str, ...]
    reviewers: int
    with_outcome: int | None
    margin_min: float
    margin_max: float
    level: float
    n_boot: int
    seed: int


@dataclass(frozen=True)
class DisparityReport:
    """Human-versus-model disparity over the effective reviews of a study."""

    summary: ReviewSummary
    rates: RateComparison
    overrides: OverrideComparison
    conditional: tuple[ConditionalFit, ...]
    reviewers: tuple[ReviewerTable, ...]
    margin_profile: tuple[MarginBin, ...]
    errors: ErrorComparison | None
    warnings: tuple[str, ...]
    context: dict[str, Any]  # study name, snapshot id, reference model... (filled by caller)

    def to_dict(self) -> dict[str, Any]:
        """Plain nested dicts and lists, ready for JSON."""
        return asdict(self)


def build_report(
    reviews: pd.DataFrame,
    *,
    level: float = 0.95,
    n_boot: int = 2000,
    seed: int = 0,
    reference_group: str | None = None,
    context: dict[str, Any] | None = None,
) -> DisparityReport:
    """Compute every figure of the disparity report from a table of effective reviews.

    Parameters
    ----------
    reviews
        One row per reviewed case, columns :data:`closecall.disparity.table.REVIEW_COLUMNS`
        and optionally ``outcome`` ("favourable", "unfavourable" or missing).
    level
        Confidence level of every interval.
    n_boot
        Bootstrap replicates for the change and ratio intervals.
    seed
        Seed for the bootstrap and Monte Carlo tests; same seed, same report.
    reference_group
        Reference group of the odds ratios (default: the largest estimable group).
    context
        Extra facts to carry into the report (study, snapshot, reference model).

    Raises
    ------
    UserError
        No reviews, only deferrals, or a single group.

    References
    ----------
    Uniform Guidelines on Employee Selection Procedures, 29 CFR 1607.4(D).
    B. Green and Y. Chen, "Disparate interactions", FAT* 2019.
    """
    if n_boot < 100:
        raise ValueError("n_boot should be at least 100 for percentile intervals")
    df = check_reviews(reviews)
    groups = group_order(df)
    with_outcome = "outcome" in df.columns
    rates = favourable_rates(df, level=level, n_boot=n_boot, seed=seed)
    overrides = override_rates(df, level=level, seed=seed)
    conditional = tuple(
        conditional_disparity(df, d, reference_group=reference_group, level=level)
        for d in ("to_unfavourable", "to_favourable")
    )
    errors = error_rates(df, level=level) if with_outcome else None
    warn: list[str] = [
        "the rates describe reviewed cases only (close calls), not every decision the model made"
    ]
    small = [r.group for r in rates.rows if r.decided < SMALL_CELL]
    if small:
        warn.append(
            f"fewer than {SMALL_CELL} decided reviews in group(s) {', '.join(small)}: "
            "read the intervals, not the point values"
        )
    deferred = int((~df["decided"]).sum())
    if deferred:
        warn.append(f"{deferred} deferred review(s) have no final decision and are left out")
    warn.append(
        "three override tests and two regressions are reported without a multiple-comparison "
        "correction; a single p below 0.05 among them is weak evidence on its own"
    )
    summary = ReviewSummary(
        reviews=len(df),
        decided=int(df["decided"].sum()),
        deferred=deferred,
        groups=tuple(groups),
        reviewers=int(df["reviewer"].nunique()),
        with_outcome=(int((df["decided"] & df["outcome"].notna()).sum()) if with_outcome else None),
        margin_min=float(df["margin"].min()),
        margin_max=float(df["margin"].max()),
        level=level,
        n_boot=n_boot,
        seed=seed,
    )
    return DisparityReport(
        summary=summary,
        rates=rates,
        overrides=overrides,
        conditional=conditional,
        reviewers=reviewer_tables(df, level=level, seed=seed),
        margin_profile=override_by_margin(df, level=level),
        errors=errors,
        warnings=tuple(warn),
        context=dict(context or {}),
    )
