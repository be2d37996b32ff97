"""Error rates by group of every model and cost lens, on held-out scores of the history.

For each model, lens and group, with the decision "favourable iff held-out p > t":

- **false-favourable rate**: decided favourably, among cases whose recorded outcome was
  unfavourable (Wilson interval);
- **false-unfavourable rate**: decided unfavourably, among cases whose recorded outcome was
  favourable (Wilson interval);

and for each group against the reference group (the largest), the **difference** of each rate
(Newcombe's hybrid score interval) and the **ratio** (Katz's log interval; Koopman's score
interval where a count is 0), with the difference a two-sample test would detect with 80 %
power. Equal error rates across groups are the criterion of Hardt, Price & Srebro (2016).

References
----------
M. Hardt, E. Price and N. Srebro, "Equality of opportunity in supervised learning", NeurIPS
2016. R. G. Newcombe, Statistics in Medicine 17 (1998) 873-890. D. Katz et al., Biometrics 34
(1978) 469-474.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import stats
from scipy.special import logit

from closecall.reports.disparity.intervals import (
    newcombe_difference_interval,
    proportion,
    ratio_interval,
    wilson_interval,
)
from closecall.reports.disparity.power import Detectable, detectable_difference


@dataclass(frozen=True)
class Rate:
    """k of n with a Wilson interval."""

    errors: int
    cases: int
    rate: float
    low: float
    high: float


@dataclass(frozen=True)
class RateGap:
    """One group's error rate against the reference group's: difference and ratio."""

    difference: float
    difference_low: float
    difference_high: float
    ratio: float
    ratio_low: float
    ratio_high: float
    ratio_method: str
    p_value: float | None  # two-sided Fisher's exact test of the 2×2 table
    detectable: Detectable


@dataclass(frozen=True)
class GroupErrorRates:
    """A model's error rates for one group under one lens, and the gaps to the reference."""

    model: str
    lens: str
    group: str
    false_favourable: Rate
    false_unfavourable: Rate
    ff_gap: RateGap | None  # None for the reference group
    fu_gap: RateGap | None


@dataclass(frozen=True)
class HeldOutErrors:
    """Error rates by group for every model and lens with held-out scores."""

    rows: tuple[GroupErrorRates, ...]
    reference_group: str
    source: str
    level: float
    notes: tuple[str, ...]


def rate(k: int, n: int, level: float) -> Rate:
    lo, hi = wilson_interval(k, n, level)
    return Rate(int(k), int(n), float(proportion(k, n)), float(lo), float(hi))


def rate_gap(k1: int, n1: int, k0: int, n0: int, level: float) -> RateGap:
    """Group (k1 of n1) against reference (k0 of n0)."""
    d, dl, dh = newcombe_difference_interval(k1, n1, k0, n0, level)
    rl, rh, method = ratio_interval(k1, n1, k0, n0, level)
    r = float(proportion(k1, n1) / proportion(k0, n0)) if k0 > 0 and n1 > 0 else np.nan
    p = None
    if n1 > 0 and n0 > 0:
        p = float(stats.fisher_exact([[k1, n1 - k1], [k0, n0 - k0]]).pvalue)
    return RateGap(
        difference=float(d),
        difference_low=float(dl),
        difference_high=float(dh),
        ratio=r,
        ratio_low=rl,
        ratio_high=rh,
        ratio_method=method,
        p_value=p,
        detectable=detectable_difference(float(proportion(k0, n0)), n0, n1),
    )


def held_out_error_rates(
    held_out: Mapping[str, NDArray[np.float64]],
    y: NDArray[np.integer],
    group_codes: NDArray[np.integer],
    levels: Sequence[str],
    lenses: Sequence[tuple[str, float]],
    *,
    level: float = 0.95,
    source: str = "out-of-fold scores of the history",
) -> HeldOutErrors:
    """False-favourable and false-unfavourable rates per model, lens and group, with gaps to
    the largest group.

    Parameters
    ----------
    held_out
        Model name → held-out log-odds of every history case (NaN where none).
    y
        1 favourable, 0 unfavourable recorded outcome.
    group_codes, levels
        Each case's group as an index into ``levels``.
    lenses
        (name, threshold t) of every cost lens.
    """
    yy = np.asarray(y).astype(bool)
    codes = np.asarray(group_codes).astype(np.int64)
    G = len(levels)
    sizes = np.bincount(codes, minlength=G)
    ref = int(np.argmax(sizes))
    rows: list[GroupErrorRates] = []
    notes: list[str] = []
    for model, raw in held_out.items():
        eta = np.asarray(raw, dtype=float)
        valid = np.isfinite(eta)
        if not valid.any():
            notes.append(f"model {model}: no held-out scores of the history; no error rates")
            continue
        neg = np.bincount(codes[valid & ~yy], minlength=G)
        pos = np.bincount(codes[valid & yy], minlength=G)
        for lens, t in lenses:
            fav = valid & (eta > float(logit(t)))
            ff = np.bincount(codes[fav & ~yy], minlength=G)
            fu = np.bincount(codes[valid & ~fav & yy], minlength=G)
            for g in range(G):  # groups, not cases
                rows.append(
                    GroupErrorRates(
                        model=model,
                        lens=lens,
                        group=str(levels[g]),
                        false_favourable=rate(int(ff[g]), int(neg[g]), level),
                        false_unfavourable=rate(int(fu[g]), int(pos[g]), level),
                        ff_gap=None
                        if g == ref
                        else rate_gap(int(ff[g]), int(neg[g]), int(ff[ref]), int(neg[ref]), level),
                        fu_gap=None
                        if g == ref
                        else rate_gap(int(fu[g]), int(pos[g]), int(fu[ref]), int(pos[ref]), level),
                    )
                )
    return HeldOutErrors(tuple(rows), str(levels[ref]), source, level, tuple(notes))
