"""Minimum detectable effects: what a test with these counts could have found.

A test that finds "no evidence" of a difference has not shown that there is none; it may simply
have had too few cases. Every test in the report therefore carries the smallest effect it would
detect with probability ``POWER`` (80 %, common practice) at the two-sided level ``ALPHA`` (5 %).

References
----------
J. Cohen, "Statistical Power Analysis for the Behavioral Sciences", 2nd ed., Erlbaum 1988
(effect sizes h and w, and their normal and noncentral chi-square power).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats
from scipy.optimize import brentq

#: Conventional power and level for the minimum detectable effect (common practice).
POWER = 0.8
ALPHA = 0.05


@dataclass(frozen=True)
class Detectable:
    """The smallest effect a test could detect with the given power, in plain words."""

    measure: str  # what the effect is measured in
    lower: float | None  # detectable effect below the null (e.g. an odds ratio < 1)
    upper: float | None  # detectable effect above the null
    power: float
    alpha: float
    text: str


def _z(alpha: float, power: float) -> float:
    return float(stats.norm.ppf(1.0 - alpha / 2.0) + stats.norm.ppf(power))


def cohen_h_detectable(
    n1: ArrayLike, n2: ArrayLike, *, alpha: float = ALPHA, power: float = POWER
) -> NDArray[np.float64]:
    """Cohen's h a two-sided two-sample test of proportions detects with the given power.

    h = (z_{1−α/2} + z_power)·√(1/n1 + 1/n2) (normal approximation, the far tail ignored, as in
    Cohen 1988, ch. 6). NaN where a sample is empty.
    """
    a = np.asarray(n1, dtype=float)
    b = np.asarray(n2, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        h = _z(alpha, power) * np.sqrt(1.0 / a + 1.0 / b)
    return np.asarray(np.where((a > 0) & (b > 0), h, np.nan), dtype=float)


def shift_by_h(p: ArrayLike, h: ArrayLike) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """The proportions at Cohen's distance h below and above p (arcsine scale, clipped)."""
    base = np.arcsin(np.sqrt(np.clip(np.asarray(p, dtype=float), 0.0, 1.0)))
    half = np.asarray(h, dtype=float) / 2.0
    lo = np.sin(np.clip(base - half, 0.0, np.pi / 2)) ** 2
    hi = np.sin(np.clip(base + half, 0.0, np.pi / 2)) ** 2
    return np.asarray(lo), np.asarray(hi)


def detectable_difference(
    p_ref: float, n_ref: int, n_other: int, *, alpha: float = ALPHA, power: float = POWER
) -> Detectable:
    """Smallest difference from a reference rate a two-sample test of proportions detects."""
    h = float(cohen_h_detectable(n_ref, n_other, alpha=alpha, power=power))
    if not np.isfinite(h) or not np.isfinite(p_ref):
        return Detectable("rate", None, None, power, alpha, "no power line: a group is empty")
    lo, hi = shift_by_h(p_ref, h)
    lo_f, hi_f = float(lo), float(hi)
    text = (
        f"with {n_ref} and {n_other} cases, a rate of {100 * lo_f:.1f}% or {100 * hi_f:.1f}% "
        f"against {100 * p_ref:.1f}% would be detected {power:.0%} of the time "
        f"(α {alpha:g}); smaller differences can go unseen"
    )
    return Detectable("rate", lo_f, hi_f, power, alpha, text)


def detectable_odds_ratio(se: float, *, alpha: float = ALPHA, power: float = POWER) -> Detectable:
    """Smallest odds ratio a Wald test with this standard error of log(OR) detects."""
    if not np.isfinite(se) or se <= 0:
        return Detectable(
            "odds ratio", None, None, power, alpha, "no power line: no standard error"
        )
    k = _z(alpha, power) * se
    lo, hi = float(np.exp(-k)), float(np.exp(k))
    text = (
        f"an odds ratio below {lo:.2f} or above {hi:.2f} would be detected {power:.0%} of the "
        f"time (α {alpha:g}); closer to 1 can go unseen"
    )
    return Detectable("odds ratio", lo, hi, power, alpha, text)


def detectable_shift(
    se: float, null: float, measure: str, *, alpha: float = ALPHA, power: float = POWER
) -> Detectable:
    """Smallest departure from ``null`` a Wald test with standard error ``se`` detects."""
    if not np.isfinite(se) or se <= 0:
        return Detectable(measure, None, None, power, alpha, "no power line: no standard error")
    k = _z(alpha, power) * se
    text = (
        f"a {measure} below {null - k:.2f} or above {null + k:.2f} would be detected "
        f"{power:.0%} of the time (α {alpha:g})"
    )
    return Detectable(measure, null - k, null + k, power, alpha, text)


def cohen_w_detectable(n: int, df: int, *, alpha: float = ALPHA, power: float = POWER) -> float:
    """Cohen's w a chi-square test with ``df`` degrees of freedom on ``n`` cases detects.

    Solves P(χ²'(df, λ = n·w²) > χ²_{1−α}(df)) = power for w (noncentral chi-square).
    """
    if n <= 0 or df <= 0:
        return float("nan")
    crit = float(stats.chi2.ppf(1.0 - alpha, df))

    def gap(w: float) -> float:
        return float(stats.ncx2.sf(crit, df, n * w * w)) - power

    return float(brentq(gap, 1e-9, 50.0, xtol=1e-10))


def detectable_w(n: int, df: int, *, alpha: float = ALPHA, power: float = POWER) -> Detectable:
    """A power line for a k×2 chi-square (or its exact replacement) in Cohen's w."""
    w = cohen_w_detectable(n, df, alpha=alpha, power=power)
    if not np.isfinite(w):
        return Detectable("Cohen's w", None, None, power, alpha, "no power line")
    text = (
        f"an association of Cohen's w {w:.2f} or more would be detected {power:.0%} of the "
        f"time (α {alpha:g}; 0.1 is small, 0.3 medium, common practice)"
    )
    return Detectable("Cohen's w", None, w, power, alpha, text)


def detectable_split(discordant: int, *, alpha: float = ALPHA, power: float = POWER) -> Detectable:
    """McNemar's exact test on ``discordant`` pairs: the smallest share q of discordant pairs
    going one way (against the null of one half) it detects with the given power."""
    if discordant <= 0:
        return Detectable("share", None, None, power, alpha, "no power line: no discordant pairs")
    n = discordant
    k = np.arange(n + 1)
    p_null = np.minimum(2.0 * stats.binom.cdf(np.minimum(k, n - k), n, 0.5), 1.0)
    reject = p_null <= alpha
    if not reject.any():
        return Detectable(
            "share",
            None,
            None,
            power,
            alpha,
            f"with {n} discordant case(s) the exact test cannot reach α {alpha:g} at all",
        )

    def gap(q: float) -> float:
        return float(stats.binom.pmf(k[reject], n, q).sum()) - power

    if gap(1.0 - 1e-12) < 0:
        return Detectable(
            "share",
            None,
            None,
            power,
            alpha,
            f"with {n} discordant case(s) even a one-sided split is detected less than "
            f"{power:.0%} of the time",
        )
    q = float(brentq(gap, 0.5, 1.0 - 1e-12, xtol=1e-8))
    text = (
        f"with {n} discordant case(s), a split of {100 * q:.0f}% / {100 * (1 - q):.0f}% or "
        f"more would be detected {power:.0%} of the time (α {alpha:g})"
    )
    return Detectable("share", 1.0 - q, q, power, alpha, text)
