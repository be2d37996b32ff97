"""Conditional disparity: are overrides in one direction likelier for a group at equal margin?"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Literal

import numpy as np
import pandas as pd
import statsmodels.api as sm
from statsmodels.tools.sm_exceptions import (
    ConvergenceWarning,
    PerfectSeparationError,
    PerfectSeparationWarning,
)

from closecall.disparity.intervals import z_value
from closecall.disparity.table import check_reviews

Direction = Literal["to_unfavourable", "to_favourable"]

#: Fewer events than this per estimated coefficient makes the fit unreliable (common practice;
#: Peduzzi et al., J Clin Epidemiol 49 (1996) 1373-1379).
EVENTS_PER_VARIABLE = 10


@dataclass(frozen=True)
class GroupOddsRatio:
    """Odds of the override for one group against the reference group, margin held equal."""

    group: str
    at_risk: int
    events: int
    odds_ratio: float | None
    low: float | None
    high: float | None
    p_value: float | None
    note: str | None


@dataclass(frozen=True)
class ConditionalFit:
    """Logistic regression of one override direction on group and margin."""

    direction: Direction
    risk_set: str
    reference_group: str | None
    at_risk: int
    events: int
    fitted: bool
    margin_odds_ratio: float | None  # per unit of margin (log-odds)
    margin_low: float | None
    margin_high: float | None
    rows: tuple[GroupOddsRatio, ...]
    level: float
    notes: tuple[str, ...]


def conditional_disparity(
    reviews: pd.DataFrame,
    direction: Direction = "to_unfavourable",
    *,
    reference_group: str | None = None,
    level: float = 0.95,
) -> ConditionalFit:
    """Odds ratio of an override direction for each group against a reference, at equal margin.

    Fits ``logit P(event) = b0 + b_m * margin + sum_g b_g [group = g]`` by maximum likelihood
    (statsmodels ``Logit``) over the risk set: for "to_unfavourable", the decided reviews the
    model had decided favourably; for "to_favourable", those it had decided unfavourably.
    ``exp(b_g)`` is the odds ratio, with a Wald interval.

    Groups with no event, or nothing but events, have an odds ratio of 0 or infinity that
    maximum likelihood cannot estimate (separation); they are left out of the fit and get a
    note. When no group is left to compare, nothing is fitted and the notes say why.

    Parameters
    ----------
    reviews
        Effective-review table.
    direction
        Which override to model.
    reference_group
        Group the odds ratios compare against; default the largest group in the risk set that
        has both events and non-events.
    level
        Confidence level of the intervals.

    References
    ----------
    B. Green and Y. Chen, "Disparate interactions", FAT* 2019.
    A. Albert and J. A. Anderson, "On the existence of maximum likelihood estimates in logistic
    regression models", Biometrika 71 (1984) 1-10 (separation).
    """
    df = check_reviews(reviews)
    model_fav = direction == "to_unfavourable"
    risk = df[df["decided"] & (df["model_fav"] == model_fav)]
    risk_set = (
        "decided reviews the model decided favourably"
        if model_fav
        else "decided reviews the model decided unfavourably"
    )
    y_all = risk[direction].to_numpy(dtype=float)
    agg = risk.groupby("group")[direction].agg(["size", "sum"])
    at_risk = {str(g): int(v) for g, v in agg["size"].items()}
    events = {str(g): int(v) for g, v in agg["sum"].items()}
    order = sorted(at_risk, key=lambda g: (-at_risk[g], g))
    notes: list[str] = []

    def empty(reason: str, ref: str | None = None) -> ConditionalFit:
        rows = tuple(
            GroupOddsRatio(g, at_risk[g], events[g], None, None, None, None, None) for g in order
        )
        return ConditionalFit(
            direction,
            risk_set,
            ref,
            len(risk),
            int(y_all.sum()),
            False,
            None,
            None,
            None,
            rows,
            level,
            (*notes, reason),
        )

    if len(risk) == 0:
        return empty("no reviews in the risk set")
    if y_all.sum() == 0:
        what = direction.replace("_", " ")
        return empty(f"no overrides {what} in the risk set: nothing to model")
    if y_all.sum() == len(y_all):
        return empty("every case in the risk set was overridden: nothing to compare against")

    estimable = [g for g in order if 0 < events[g] < at_risk[g]]
    separated = [g for g in order if g not in estimable]
    ref: str | None
    if reference_group is None:
        ref = estimable[0] if estimable else None
    else:
        ref = reference_group
        if ref not in at_risk:
            return empty(f"reference group {ref!r} has no reviews in the risk set")
        if ref not in estimable:
            return empty(
                f"reference group {ref!r} has {events[ref]} events in "
                f"{at_risk[ref]} cases: odds against it are not estimable"
            )
    for g in separated:
        kind = "no" if events[g] == 0 else "only"
        notes.append(
            f"group {g}: {kind} overrides in {at_risk[g]} case(s) at risk; its odds ratio "
            "is 0 or unbounded and cannot be estimated (separation), so it is left out of the fit"
        )
    if ref is None or len(estimable) < 2:
        return empty("fewer than two groups have both overrides and non-overrides", ref)

    fit_df = risk[risk["group"].isin(estimable)]
    others = [g for g in estimable if g != ref]
    x = pd.DataFrame({"const": 1.0, "margin": fit_df["margin"].to_numpy(dtype=float)})
    for g in others:
        x[f"group[{g}]"] = (fit_df["group"].to_numpy() == g).astype(float)
    y = fit_df[direction].to_numpy(dtype=float)
    k = x.shape[1] - 1
    if y.sum() < EVENTS_PER_VARIABLE * k or (len(y) - y.sum()) < EVENTS_PER_VARIABLE * k:
        notes.append(
            f"only {int(min(y.sum(), len(y) - y.sum()))} cases in the rarer outcome for "
            f"{k} coefficients (fewer than {EVENTS_PER_VARIABLE} per coefficient, common "
            "practice): estimates are unstable and intervals approximate"
        )
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", PerfectSeparationWarning)
            warnings.simplefilter("ignore", ConvergenceWarning)
            res = sm.Logit(y, x).fit(disp=0, method="newton", maxiter=100)
    except (PerfectSeparationError, PerfectSeparationWarning, np.linalg.LinAlgError) as exc:
        return empty(f"the model could not be fitted: {exc}", ref)
    if not res.mle_retvals.get("converged", False):
        return empty("the fit did not converge (likely quasi-separation by margin)", ref)

    z = z_value(level)
    params = np.asarray(res.params, dtype=float)
    bse = np.asarray(res.bse, dtype=float)
    pvals = np.asarray(res.pvalues, dtype=float)
    if not np.all(np.isfinite(bse)):
        return empty("standard errors are not finite (near-separation)", ref)
    rows: list[GroupOddsRatio] = []
    for g in order:
        at, ev = at_risk[g], events[g]
        if g == ref:
            rows.append(GroupOddsRatio(g, at, ev, 1.0, None, None, None, "reference group"))
        elif g in others:
            j = 2 + others.index(g)
            rows.append(
                GroupOddsRatio(
                    g,
                    at,
                    ev,
                    float(np.exp(params[j])),
                    float(np.exp(params[j] - z * bse[j])),
                    float(np.exp(params[j] + z * bse[j])),
                    float(pvals[j]),
                    None,
                )
            )
        else:
            rows.append(GroupOddsRatio(g, at, ev, None, None, None, None, "not estimable"))
    return ConditionalFit(
        direction=direction,
        risk_set=risk_set,
        reference_group=ref,
        at_risk=len(risk),
        events=int(y_all.sum()),
        fitted=True,
        margin_odds_ratio=float(np.exp(params[1])),
        margin_low=float(np.exp(params[1] - z * bse[1])),
        margin_high=float(np.exp(params[1] + z * bse[1])),
        rows=tuple(rows),
        level=level,
        notes=tuple(notes),
    )
