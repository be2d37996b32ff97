"""Every rate and override figure by period of the review's entry time (month or quarter).

A pattern that holds over a year can come from one month, and a change of practice can hide
in a yearly figure. Per period (of the effective review's UTC entry time in the ledger) and
group: model and final favourable rates (Wilson), the adverse impact ratio of each (Katz),
override rates in both directions (Wilson) and the override × group test of that period
(Fisher's exact test, or chi-square / Monte Carlo as in the main table).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from closecall.core.errors import Fix, UserError
from closecall.reports.disparity.contingency import IndependenceTest
from closecall.reports.disparity.intervals import proportion, wilson_interval
from closecall.reports.disparity.overrides import GroupOverrides, override_counts, override_tests
from closecall.reports.disparity.rates import air_intervals
from closecall.reports.disparity.table import check_reviews, group_order

PERIODS = ("month", "quarter")


@dataclass(frozen=True)
class PeriodGroup:
    """One group's rates in one period."""

    group: str
    decided: int
    model_rate: float
    model_low: float
    model_high: float
    final_rate: float
    final_low: float
    final_high: float
    model_air: float
    model_air_low: float
    model_air_high: float
    final_air: float
    final_air_low: float
    final_air_high: float
    overrides: GroupOverrides


@dataclass(frozen=True)
class Period:
    """One period's figures."""

    period: str  # e.g. "2026-12" or "2026Q4"
    reviews: int
    decided: int
    rows: tuple[PeriodGroup, ...]
    test: IndependenceTest


@dataclass(frozen=True)
class PeriodReport:
    """The report's rates and overrides, period by period."""

    unit: str  # "month" or "quarter"
    periods: tuple[Period, ...]
    notes: tuple[str, ...]


def check_period(unit: str) -> str:
    """Validate a period unit (the report's ``period``)."""
    if unit not in PERIODS:
        raise UserError(
            f"{unit!r} is not a period unit", Fix("period", allowed=PERIODS), about="period"
        )
    return unit


def period_labels(times: pd.Series, unit: str) -> pd.Series:
    """Month ("2026-12") or quarter ("2026Q4") of ISO 8601 UTC times (missing stays missing)."""
    check_period(unit)
    stamp = pd.to_datetime(times, utc=True, errors="coerce")
    year = stamp.dt.year.astype("Int64").astype(str)
    if unit == "month":
        label = year + "-" + stamp.dt.month.astype("Int64").astype(str).str.zfill(2)
    else:
        label = year + "Q" + stamp.dt.quarter.astype("Int64").astype(str)
    out = label.astype(object)
    out[stamp.isna().to_numpy()] = None
    return out


def by_period(
    reviews: pd.DataFrame, unit: str = "month", *, level: float = 0.95, seed: int = 0
) -> PeriodReport:
    """Rates, ratios and overrides per period and group.

    ``reviews`` needs a ``time`` column (ISO 8601, as in the ledger export); reviews without a
    readable time are counted in the notes and left out.
    """
    check_period(unit)
    df = check_reviews(reviews)
    groups = group_order(df)
    notes: list[str] = []
    if "time" not in df.columns:
        return PeriodReport(unit, (), ("the review table has no entry times",))
    label = period_labels(df["time"], unit)
    missing = int(label.isna().sum())
    if missing:
        notes.append(f"{missing} review(s) without a readable entry time are left out")
    df = df.assign(_period=label)
    out: list[Period] = []
    for name in sorted(label.dropna().unique()):  # periods, not cases
        sub = df[df["_period"] == name]
        d = sub[sub["decided"]]
        ov = override_counts(sub, groups, level)
        n = np.array([r.decided for r in ov])
        mk = np.array([r.model_favourable for r in ov])
        fk = (
            d.groupby("group")["final_fav"].sum().reindex(groups, fill_value=0).to_numpy()
            if len(d)
            else np.zeros(len(groups), dtype=np.int64)
        )
        mr, fr = proportion(mk, n), proportion(fk, n)
        ml, mh = wilson_interval(mk, n, level)
        fl, fh = wilson_interval(fk, n, level)
        with np.errstate(invalid="ignore", divide="ignore"):
            ref_m = int(np.nanargmax(np.where(n > 0, mr, -1.0)))
            ref_f = int(np.nanargmax(np.where(n > 0, fr, -1.0)))
            m_air = mr / mr[ref_m] if mr[ref_m] > 0 else np.full(len(n), np.nan)
            f_air = fr / fr[ref_f] if fr[ref_f] > 0 else np.full(len(n), np.nan)
        mal, mah, _ = air_intervals(mk, n, ref_m, level)
        fal, fah, _ = air_intervals(fk, n, ref_f, level)
        rows = tuple(
            PeriodGroup(
                group=g,
                decided=int(n[i]),
                model_rate=float(mr[i]),
                model_low=float(ml[i]),
                model_high=float(mh[i]),
                final_rate=float(fr[i]),
                final_low=float(fl[i]),
                final_high=float(fh[i]),
                model_air=float(m_air[i]),
                model_air_low=mal[i],
                model_air_high=mah[i],
                final_air=float(f_air[i]),
                final_air_low=fal[i],
                final_air_high=fah[i],
                overrides=ov[i],
            )
            for i, g in enumerate(groups)
        )
        out.append(
            Period(
                period=str(name),
                reviews=len(sub),
                decided=int(sub["decided"].sum()),
                rows=rows,
                test=override_tests(ov, seed)[0],
            )
        )
    if len(out) == 1:
        notes.append(
            f"every review falls in one {unit} ({out[0].period}): there is no change over time "
            "to show yet"
        )
    return PeriodReport(unit, tuple(out), tuple(notes))
