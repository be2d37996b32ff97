"""Favourable rates by group, model versus final, and the adverse impact ratio."""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from closecall.reports.disparity.intervals import (
    bootstrap_cells,
    percentile_interval,
    proportion,
    ratio_interval,
    wilson_interval,
)
from closecall.reports.disparity.table import check_reviews, group_order

#: The four-fifths rule: a rate under 4/5 of the highest group's rate is read as adverse impact.
FOUR_FIFTHS = 0.8


def adverse_impact_ratios(rates: Mapping[str, float]) -> dict[str, float]:
    """Each group's favourable rate divided by the highest group's rate.

    Returns NaN for every group when no group has a positive rate.

    References
    ----------
    Uniform Guidelines on Employee Selection Procedures, 29 CFR 1607.4(D).
    """
    top = max(rates.values())
    if not top > 0:
        return {g: float("nan") for g in rates}
    return {g: float(r) / float(top) for g, r in rates.items()}


def four_fifths_flag(ratio: float) -> bool:
    """True when an adverse impact ratio is below four-fifths (29 CFR 1607.4(D))."""
    return bool(ratio < FOUR_FIFTHS)


def air_intervals(
    k: np.ndarray, n: np.ndarray, ref: int, level: float
) -> tuple[list[float], list[float], list[str]]:
    """Interval of every group's adverse impact ratio k_g/n_g ÷ k_ref/n_ref (not for ``ref``):
    Katz's log interval, or Koopman's score interval where a count is 0."""
    lo, hi, how = [], [], []
    for g in range(len(k)):  # groups, not cases
        if g == ref:  # np.nan, one object: equal results compare equal
            lo.append(np.nan)
            hi.append(np.nan)
            how.append("reference")
            continue
        a, b, m = ratio_interval(int(k[g]), int(n[g]), int(k[ref]), int(n[ref]), level)
        lo.append(a)
        hi.append(b)
        how.append(m)
    return lo, hi, how


@dataclass(frozen=True)
class GroupRates:
    """Model and final favourable rates of one group, over its decided reviews."""

    group: str
    reviewed: int
    deferred: int
    decided: int
    model_favourable: int
    model_rate: float
    model_low: float
    model_high: float
    final_favourable: int
    final_rate: float
    final_low: float
    final_high: float
    change: float  # final_rate - model_rate
    change_low: float
    change_high: float
    model_air: float  # 1 for the most favoured group, whose bounds are NaN (no interval)
    model_air_low: float  # bootstrap percentile interval
    model_air_high: float
    model_flag: bool
    final_air: float
    final_air_low: float
    final_air_high: float
    final_flag: bool
    model_air_ratio_low: float  # Katz log interval (Koopman score where a count is 0)
    model_air_ratio_high: float
    model_air_ratio_method: str
    final_air_ratio_low: float
    final_air_ratio_high: float
    final_air_ratio_method: str


@dataclass(frozen=True)
class RateComparison:
    """Favourable rates and adverse impact ratios for every group, model versus final."""

    rows: tuple[GroupRates, ...]
    model_reference: str  # most favoured group under the model
    final_reference: str  # most favoured group after review
    lowest_model_air: float
    lowest_final_air: float
    lowest_air_change: float
    lowest_air_change_low: float
    lowest_air_change_high: float
    level: float
    n_boot: int
    seed: int
    notes: tuple[str, ...]


def favourable_rates(
    reviews: pd.DataFrame, *, level: float = 0.95, n_boot: int = 2000, seed: int = 0
) -> RateComparison:
    """Per-group favourable rates of the model and of the final decisions.

    Only decided reviews count (deferrals have no final decision), so both rates describe the
    same cases. Rates carry Wilson intervals; each adverse impact ratio carries Katz's log
    interval for a ratio of two independent proportions (Koopman's score interval where a
    count is 0) and, beside it, a percentile interval from a case bootstrap stratified by
    group; the change from model to final carries the bootstrap interval. The most favoured
    group is held at its observed identity.

    Parameters
    ----------
    reviews
        Effective-review table (see :data:`closecall.reports.disparity.table.REVIEW_COLUMNS`).
    level
        Confidence level of every interval.
    n_boot
        Bootstrap replicates.
    seed
        Seed of the bootstrap.

    References
    ----------
    Uniform Guidelines on Employee Selection Procedures, 29 CFR 1607.4(D) (four-fifths rule).
    E. B. Wilson, JASA 22 (1927) 209-212 (score interval).
    D. Katz et al., Biometrics 34 (1978) 469-474 (log interval for a ratio).
    B. Efron and R. J. Tibshirani, "An Introduction to the Bootstrap", 1993.
    """
    df = check_reviews(reviews)
    groups = group_order(df)
    cells = _decided_cells(df, groups)
    reviewed = df["group"].value_counts().reindex(groups, fill_value=0).to_numpy()
    deferred = df.loc[~df["decided"], "group"].value_counts().reindex(groups, fill_value=0)
    n = cells.sum(axis=1)
    m = _side(cells[:, 0] + cells[:, 1], n, groups, level)
    f = _side(cells[:, 0] + cells[:, 2], n, groups, level)
    boot = _bootstrap(cells, m["ref"], f["ref"], n_boot, seed, level)
    rows = [
        GroupRates(
            group=g,
            reviewed=int(reviewed[i]),
            deferred=int(deferred.iloc[i]),
            decided=int(n[i]),
            change=float(f["rate"][i] - m["rate"][i]),
            change_low=float(boot["change_lo"][i]),
            change_high=float(boot["change_hi"][i]),
            **_side_fields("model", m, boot["m_air_lo"], boot["m_air_hi"], i, g),
            **_side_fields("final", f, boot["f_air_lo"], boot["f_air_hi"], i, g),
        )
        for i, g in enumerate(groups)
    ]
    model_rate, final_rate = m["rate"], f["rate"]
    notes = _rate_notes(rows, model_rate, final_rate)
    lowest_m = float(np.nanmin(list(m["air"].values()))) if model_rate.max() > 0 else np.nan
    lowest_f = float(np.nanmin(list(f["air"].values()))) if final_rate.max() > 0 else np.nan
    return RateComparison(
        rows=tuple(rows),
        model_reference=groups[m["ref"]],
        final_reference=groups[f["ref"]],
        lowest_model_air=lowest_m,
        lowest_final_air=lowest_f,
        lowest_air_change=lowest_f - lowest_m,
        lowest_air_change_low=float(boot["lc_lo"][0]),
        lowest_air_change_high=float(boot["lc_hi"][0]),
        level=level,
        n_boot=n_boot,
        seed=seed,
        notes=notes,
    )


def _decided_cells(df: pd.DataFrame, groups: list[str]) -> np.ndarray:
    """Decided reviews per group in four cells: model favourable and final favourable, model
    favourable and final unfavourable, model unfavourable and final favourable, both
    unfavourable."""
    decided = df[df["decided"]]
    gi = pd.Index(groups).get_indexer(pd.Index(decided["group"]))
    cell = (~decided["model_fav"].to_numpy()) * 2 + (~decided["final_fav"].to_numpy())
    return np.bincount(gi * 4 + cell, minlength=4 * len(groups)).reshape(len(groups), 4)


def _side(k: np.ndarray, n: np.ndarray, groups: list[str], level: float) -> dict[str, Any]:
    """One side (model or final): rates with Wilson intervals, the reference (highest-rate)
    group, adverse impact ratios and their Katz (or Koopman) intervals."""
    rate = proportion(k, n)
    low, high = wilson_interval(k, n, level)
    ref = int(np.argmax(rate))
    ratio_low, ratio_high, ratio_method = air_intervals(k, n, ref, level)
    return {
        "k": k,
        "rate": rate,
        "low": low,
        "high": high,
        "air": adverse_impact_ratios(dict(zip(groups, rate, strict=True))),
        "ref": ref,
        "ratio_low": ratio_low,
        "ratio_high": ratio_high,
        "ratio_method": ratio_method,
    }


def _side_fields(
    prefix: str, side: dict[str, Any], air_lo: np.ndarray, air_hi: np.ndarray, i: int, g: str
) -> dict[str, Any]:
    """Group ``i``'s model or final fields of a :class:`GroupRates`."""
    ref = side["ref"]
    return {
        f"{prefix}_favourable": int(side["k"][i]),
        f"{prefix}_rate": float(side["rate"][i]),
        f"{prefix}_low": float(side["low"][i]),
        f"{prefix}_high": float(side["high"][i]),
        f"{prefix}_air": side["air"][g],
        f"{prefix}_air_low": float(air_lo[i]) if i != ref else np.nan,
        f"{prefix}_air_high": float(air_hi[i]) if i != ref else np.nan,
        f"{prefix}_flag": four_fifths_flag(side["air"][g]),
        f"{prefix}_air_ratio_low": side["ratio_low"][i],
        f"{prefix}_air_ratio_high": side["ratio_high"][i],
        f"{prefix}_air_ratio_method": side["ratio_method"][i],
    }


def _bootstrap(
    cells: np.ndarray, ref_m: int, ref_f: int, n_boot: int, seed: int, level: float
) -> dict[str, np.ndarray]:
    """Percentile intervals from a seeded bootstrap stratified by group: the change in each
    group's rate, each ratio, and the change in the lowest ratio."""
    rng = np.random.default_rng(seed)
    draws = bootstrap_cells(cells, n_boot, rng)
    bn = draws.sum(axis=2).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        bm = (draws[:, :, 0] + draws[:, :, 1]) / bn
        bf = (draws[:, :, 0] + draws[:, :, 2]) / bn
        bm_air = bm / bm[:, [ref_m]]
        bf_air = bf / bf[:, [ref_f]]
    out: dict[str, np.ndarray] = {}
    out["change_lo"], out["change_hi"] = percentile_interval(bf - bm, level)
    out["m_air_lo"], out["m_air_hi"] = percentile_interval(bm_air, level)
    out["f_air_lo"], out["f_air_hi"] = percentile_interval(bf_air, level)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN replicates stay NaN
        low_change = np.nanmin(bf_air, axis=1) - np.nanmin(bm_air, axis=1)
    out["lc_lo"], out["lc_hi"] = percentile_interval(low_change[:, None], level)
    return out


def _rate_notes(
    rows: list[GroupRates], model_rate: np.ndarray, final_rate: np.ndarray
) -> tuple[str, ...]:
    notes: list[str] = []
    if not model_rate.max() > 0:
        notes.append("the model decided no reviewed case favourably: ratios are undefined")
    if not final_rate.max() > 0:
        notes.append("no reviewed case ended favourable: ratios after review are undefined")
    for r in rows:
        for label, air, lo, hi in (
            ("model", r.model_air, r.model_air_ratio_low, r.model_air_ratio_high),
            ("final", r.final_air, r.final_air_ratio_low, r.final_air_ratio_high),
        ):
            if np.isfinite(lo) and np.isfinite(hi) and lo < FOUR_FIFTHS <= hi:
                side = "below" if air < FOUR_FIFTHS else "at or above"
                notes.append(
                    f"group {r.group}: the {label} ratio {air:.2f} is {side} 0.8 but its "
                    f"interval ({lo:.2f} to {hi:.2f}) spans 0.8, so the flag is not settled"
                )
    return tuple(notes)
