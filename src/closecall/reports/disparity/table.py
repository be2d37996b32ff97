"""The review table every disparity function reads, and its validation."""

from __future__ import annotations

import numpy as np
import pandas as pd

from closecall.core.errors import UserError
from closecall.core.vocabulary import (
    ACTIONS,
    DECISIONS,
    FAVOURABLE,
)

#: Columns of the effective-review table: one row per reviewed case.
REVIEW_COLUMNS = (
    "case_id",
    "group",
    "reviewer",
    "margin",
    "model_decision",
    "final_decision",
    "action",
)


def check_reviews(reviews: pd.DataFrame, source: str = "review table") -> pd.DataFrame:
    """Validate the review table and return a clean copy with derived indicator columns.

    Adds boolean columns ``decided`` (not deferred), ``model_fav``, ``final_fav``,
    ``to_favourable`` (model unfavourable, final favourable) and ``to_unfavourable``
    (model favourable, final unfavourable).

    Raises
    ------
    UserError
        If columns are missing, a value is outside its vocabulary, there are no reviews, all
        reviews are deferrals, or fewer than two groups were reviewed.
    """
    missing = [c for c in REVIEW_COLUMNS if c not in reviews.columns]
    if missing:
        raise UserError(
            f"{source}: missing column(s) {', '.join(missing)}",
            f"the table needs the columns {', '.join(REVIEW_COLUMNS)}",
        )
    if len(reviews) == 0:
        raise UserError(
            f"{source}: there are no reviews to analyse",
            "record reviews first (closecall review), or for the demo: closecall demo-reviews 300",
        )
    df = reviews.copy()
    df["group"] = df["group"].astype(str)
    df["reviewer"] = df["reviewer"].astype(str)
    df["margin"] = pd.to_numeric(df["margin"], errors="coerce").astype(float)
    _check_vocab(df, "action", ACTIONS, source)
    _check_vocab(df, "model_decision", DECISIONS, source)
    final = df["final_decision"]
    bad = final.notna() & ~final.isin(DECISIONS)
    if bad.any():
        row = int(np.flatnonzero(bad.to_numpy())[0])
        raise UserError(
            f"{source}: row {row + 1}: final_decision {final.iloc[row]!r} is not one of "
            f"{', '.join(DECISIONS)} or empty"
        )
    if df["margin"].isna().any():
        row = int(np.flatnonzero(df["margin"].isna().to_numpy())[0])
        raise UserError(f"{source}: row {row + 1}: margin is missing or not a number")
    if df["case_id"].duplicated().any():
        dup = df["case_id"][df["case_id"].duplicated()].iloc[0]
        raise UserError(
            f"{source}: case {dup!r} appears twice",
            "pass only the effective (latest) review of each case",
        )
    df["decided"] = final.notna().to_numpy()
    df["model_fav"] = (df["model_decision"] == FAVOURABLE).to_numpy()
    df["final_fav"] = (final == FAVOURABLE).fillna(False).to_numpy(dtype=bool)
    df["to_favourable"] = df["decided"] & ~df["model_fav"] & df["final_fav"]
    df["to_unfavourable"] = df["decided"] & df["model_fav"] & ~df["final_fav"]
    df["overridden"] = df["to_favourable"] | df["to_unfavourable"]
    if not df["decided"].any():
        raise UserError(
            f"{source}: all {len(df)} reviews are deferrals; there are no final decisions",
            "the report needs upheld or overridden cases",
        )
    groups = df.loc[df["decided"], "group"].unique()
    if len(groups) < 2:
        raise UserError(
            f"{source}: every decided review is in group {groups[0]!r}; "
            "a disparity report compares at least two groups",
            "review cases from more than one group, or check the group attribute in the config",
        )
    return df


def _check_vocab(df: pd.DataFrame, column: str, allowed: tuple[str, ...], source: str) -> None:
    bad = ~df[column].isin(allowed)
    if bad.any():
        row = int(np.flatnonzero(bad.to_numpy())[0])
        raise UserError(
            f"{source}: row {row + 1}: {column} {df[column].iloc[row]!r} is not one of "
            f"{', '.join(allowed)}"
        )


def group_order(df: pd.DataFrame) -> list[str]:
    """Groups of decided reviews, largest first (ties by name)."""
    counts = df.loc[df["decided"], "group"].value_counts()
    return sorted(counts.index, key=lambda g: (-int(counts[g]), str(g)))
