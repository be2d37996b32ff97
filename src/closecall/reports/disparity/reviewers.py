"""The override table per reviewer, with small-sample warnings."""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from closecall.reports.disparity.contingency import IndependenceTest
from closecall.reports.disparity.overrides import (
    GroupOverrides,
    any_override_test,
    override_counts_by,
)
from closecall.reports.disparity.table import check_reviews, group_order

#: Fewer decided reviews than this in a reviewer × group cell earns a warning (common practice:
#: intervals at this size are wider than the differences usually of interest).
SMALL_CELL = 30


@dataclass(frozen=True)
class ReviewerTable:
    """One reviewer's overrides by group and the test of override × group for them alone."""

    reviewer: str
    decided: int
    deferred: int
    rows: tuple[GroupOverrides, ...]
    test: IndependenceTest
    warnings: tuple[str, ...]


def reviewer_tables(
    reviews: pd.DataFrame, *, level: float = 0.95, seed: int = 0, small: int = SMALL_CELL
) -> tuple[ReviewerTable, ...]:
    """Per reviewer: the override-by-group table and its test, most active reviewer first.

    Reviewer names are used as given; pseudonymise the table first if they must not appear.

    References
    ----------
    B. Green and Y. Chen, "Disparate interactions", FAT* 2019.
    """
    df = check_reviews(reviews)
    groups = group_order(df)
    order = df["reviewer"].value_counts()
    decided = df.groupby("reviewer")["decided"].sum()
    tables = override_counts_by(df, groups, level, by="reviewer")
    out: list[ReviewerTable] = []
    for name in sorted(order.index, key=lambda r: (-int(order[r]), str(r))):  # reviewers
        rows = tables[name]
        warn: list[str] = []
        thin = [r.group for r in rows if 0 < r.decided < small]
        if thin:
            warn.append(
                f"fewer than {small} decided reviews for group(s) {', '.join(thin)}: "
                "rates are imprecise, read the intervals"
            )
        absent = [r.group for r in rows if r.decided == 0]
        if absent:
            warn.append(f"no decided reviews for group(s) {', '.join(absent)}")
        out.append(
            ReviewerTable(
                reviewer=str(name),
                decided=int(decided[name]),
                deferred=int(order[name] - decided[name]),
                rows=tuple(rows),
                test=any_override_test(rows, seed),
                warnings=tuple(warn),
            )
        )
    return tuple(out)
