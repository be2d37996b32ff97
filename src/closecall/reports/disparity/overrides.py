"""How often, and in which direction, reviewers overrode the model in each group."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from closecall.reports.disparity.contingency import IndependenceTest, independence_test
from closecall.reports.disparity.intervals import proportion, wilson_interval
from closecall.reports.disparity.table import check_reviews, group_order


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
    return override_counts_by(df, groups, level, by=None)[None]


def override_counts_by(
    df: pd.DataFrame, groups: list[str], level: float, by: str | None
) -> dict[object, list[GroupOverrides]]:
    """Per-group override rows for each value of column ``by`` (or the whole table when
    ``by`` is None), from one grouped count: no pass over the cases per value."""
    keys = [by, "group"] if by is not None else ["group"]
    d = df[df["decided"]]
    agg = d.groupby(keys).agg(
        decided=("decided", "size"),
        overridden=("overridden", "sum"),
        model_fav=("model_fav", "sum"),
        to_unf=("to_unfavourable", "sum"),
        to_fav=("to_favourable", "sum"),
    )
    deferred = df[~df["decided"]].groupby(keys).size()
    values = [None] if by is None else list(pd.unique(df[by]))
    index = (
        pd.Index(groups, name="group")
        if by is None
        else pd.MultiIndex.from_product([values, groups], names=keys)
    )
    agg = agg.reindex(index, fill_value=0)
    agg["deferred"] = deferred.reindex(index, fill_value=0).to_numpy()
    n = agg["decided"].to_numpy()
    ov = agg["overridden"].to_numpy()
    mf = agg["model_fav"].to_numpy()
    mu = n - mf
    tu = agg["to_unf"].to_numpy()
    tf = agg["to_fav"].to_numpy()
    de = agg["deferred"].to_numpy()
    ov_lo, ov_hi = wilson_interval(ov, n, level)
    tu_lo, tu_hi = wilson_interval(tu, mf, level)
    tf_lo, tf_hi = wilson_interval(tf, mu, level)
    ov_rate, tu_rate, tf_rate = proportion(ov, n), proportion(tu, mf), proportion(tf, mu)
    rows = [
        GroupOverrides(
            group=groups[i % len(groups)],
            decided=int(n[i]),
            deferred=int(de[i]),
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
        for i in range(len(n))
    ]
    G = len(groups)
    return {v: rows[k * G : (k + 1) * G] for k, v in enumerate(values)}


def any_override_test(rows: list[GroupOverrides], seed: int = 0) -> IndependenceTest:
    """The test of group × any override (the first of :func:`override_tests`)."""
    names = tuple(r.group for r in rows)
    any_t = np.array([[r.overridden, r.upheld] for r in rows])
    return independence_test("override × group", any_t, names, ("overridden", "upheld"), seed=seed)


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
