"""How often, and in which direction, reviewers overrode the model in each group."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from closecall.disparity.contingency import IndependenceTest, independence_test
from closecall.disparity.intervals import proportion, wilson_interval
from closecall.disparity.table import check_reviews, group_order


@dataclass(frozen=True)
class GroupOverrides:
    """Override counts and rates of one group.

    ``override_rate`` is over decided reviews. ``to_unfavourable_rate`` is over the decided
    reviews the model had decided favourably (the only ones that can be overridden to
    unfavourable); ``to_favourable_rate`` likewise over the model-unfavourable ones.
    """

    group: str
    decided: int
    deferred: int
    upheld: int
    overridden: int
    override_rate: float
    override_low: float
    override_high: float
    model_favourable: int
    to_unfavourable: int
    to_unfavourable_rate: float
    to_unfavourable_low: float
    to_unfavourable_high: float
    model_unfavourable: int
    to_favourable: int
    to_favourable_rate: float
    to_favourable_low: float
    to_favourable_high: float


@dataclass(frozen=True)
class OverrideComparison:
    """Override rates per group and the tests of override × group."""

    rows: tuple[GroupOverrides, ...]
    tests: tuple[IndependenceTest, ...]
    level: float


def override_counts(df: pd.DataFrame, groups: list[str], level: float) -> list[GroupOverrides]:
    """Per-group override rows for an already checked review table (see check_reviews)."""
    d = df[df["decided"]]
    by = d.groupby("group")
    agg = pd.DataFrame(
        {
            "decided": by.size(),
            "overridden": by["overridden"].sum(),
            "model_fav": by["model_fav"].sum(),
            "to_unf": by["to_unfavourable"].sum(),
            "to_fav": by["to_favourable"].sum(),
        }
    ).reindex(groups, fill_value=0)
    agg["deferred"] = df.loc[~df["decided"], "group"].value_counts().reindex(groups, fill_value=0)
    agg["model_unf"] = agg["decided"] - agg["model_fav"]
    n = agg["decided"].to_numpy()
    ov = agg["overridden"].to_numpy()
    mf = agg["model_fav"].to_numpy()
    mu = agg["model_unf"].to_numpy()
    tu = agg["to_unf"].to_numpy()
    tf = agg["to_fav"].to_numpy()
    ov_lo, ov_hi = wilson_interval(ov, n, level)
    tu_lo, tu_hi = wilson_interval(tu, mf, level)
    tf_lo, tf_hi = wilson_interval(tf, mu, level)
    ov_rate, tu_rate, tf_rate = proportion(ov, n), proportion(tu, mf), proportion(tf, mu)
    return [
        GroupOverrides(
            group=g,
            decided=int(n[i]),
            deferred=int(agg["deferred"].iloc[i]),
            upheld=int(n[i] - ov[i]),
            overridden=int(ov[i]),
            override_rate=float(ov_rate[i]),
            override_low=float(ov_lo[i]),
            override_high=float(ov_hi[i]),
            model_favourable=int(mf[i]),
            to_unfavourable=int(tu[i]),
            to_unfavourable_rate=float(tu_rate[i]),
            to_unfavourable_low=float(tu_lo[i]),
            to_unfavourable_high=float(tu_hi[i]),
            model_unfavourable=int(mu[i]),
            to_favourable=int(tf[i]),
            to_favourable_rate=float(tf_rate[i]),
            to_favourable_low=float(tf_lo[i]),
            to_favourable_high=float(tf_hi[i]),
        )
        for i, g in enumerate(groups)
    ]


def override_tests(rows: list[GroupOverrides], seed: int = 0) -> tuple[IndependenceTest, ...]:
    """Three tests of group × override: any override; to unfavourable among model-favourable
    cases; to favourable among model-unfavourable cases."""
    names = tuple(r.group for r in rows)
    any_t = np.array([[r.overridden, r.upheld] for r in rows])
    unf_t = np.array([[r.to_unfavourable, r.model_favourable - r.to_unfavourable] for r in rows])
    fav_t = np.array([[r.to_favourable, r.model_unfavourable - r.to_favourable] for r in rows])
    return (
        independence_test("override × group", any_t, names, ("overridden", "upheld"), seed=seed),
        independence_test(
            "to unfavourable × group (model favourable)",
            unf_t,
            names,
            ("to unfavourable", "kept favourable"),
            seed=seed,
        ),
        independence_test(
            "to favourable × group (model unfavourable)",
            fav_t,
            names,
            ("to favourable", "kept unfavourable"),
            seed=seed,
        ),
    )


def override_rates(
    reviews: pd.DataFrame, *, level: float = 0.95, seed: int = 0
) -> OverrideComparison:
    """Override rate and direction per group, with Wilson intervals and independence tests.

    A review counts as an override when the final decision differs from the model's decision
    (an "override" to the decision the model already made changes nothing and counts as
    upheld). Deferrals are counted but excluded from every rate.

    References
    ----------
    B. Green and Y. Chen, "Disparate interactions: an algorithm-in-the-loop analysis of fairness
    in risk assessments", FAT* 2019 (human deviations from a model, by group).
    """
    df = check_reviews(reviews)
    groups = group_order(df)
    rows = override_counts(df, groups, level)
    return OverrideComparison(rows=tuple(rows), tests=override_tests(rows, seed), level=level)
