"""Confidence intervals for proportions and a seeded, vectorised bootstrap."""

from __future__ import annotations

import warnings

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats

FloatArray = NDArray[np.float64]


def z_value(level: float) -> float:
    """Two-sided standard-normal quantile for a confidence level in (0, 1)."""
    if not 0.0 < level < 1.0:
        raise ValueError(f"confidence level must be between 0 and 1, got {level}")
    return float(stats.norm.ppf(0.5 + level / 2.0))


def wilson_interval(
    successes: ArrayLike, trials: ArrayLike, level: float = 0.95
) -> tuple[FloatArray, FloatArray]:
    """Wilson score interval for binomial proportions (vectorised).

    Parameters
    ----------
    successes, trials
        Counts; arrays broadcast together. Where ``trials`` is 0 both bounds are NaN.
    level
        Confidence level.

    Returns
    -------
    low, high
        Arrays of bounds in [0, 1].

    References
    ----------
    E. B. Wilson, "Probable inference, the law of succession, and statistical inference",
    Journal of the American Statistical Association 22 (1927) 209-212.
    """
    k = np.asarray(successes, dtype=float)
    n = np.asarray(trials, dtype=float)
    z = z_value(level)
    with np.errstate(invalid="ignore", divide="ignore"):
        p = k / n
        denom = 1.0 + z * z / n
        centre = (p + z * z / (2.0 * n)) / denom
        half = z / denom * np.sqrt(p * (1.0 - p) / n + z * z / (4.0 * n * n))
        low = np.where(n > 0, np.clip(centre - half, 0.0, 1.0), np.nan)
        high = np.where(n > 0, np.clip(centre + half, 0.0, 1.0), np.nan)
    return np.asarray(low, dtype=float), np.asarray(high, dtype=float)


def proportion(successes: ArrayLike, trials: ArrayLike) -> FloatArray:
    """k / n with NaN where n is 0."""
    k = np.asarray(successes, dtype=float)
    n = np.asarray(trials, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.asarray(np.where(n > 0, k / n, np.nan), dtype=float)


def bootstrap_cells(
    cell_counts: NDArray[np.int64], n_boot: int, rng: np.random.Generator
) -> NDArray[np.int64]:
    """Resample a table of cell counts per group, as a case-level bootstrap would.

    Drawing ``n`` cases with replacement from a group whose cases fall into cells with
    counts ``c`` gives cell counts distributed Multinomial(n, c / n); this draws those counts
    directly, so the bootstrap costs the same for 100 or 10 million cases.

    Parameters
    ----------
    cell_counts
        Shape (groups, cells), non-negative integers.
    n_boot
        Number of bootstrap replicates.

    Returns
    -------
    Array of shape (n_boot, groups, cells).

    References
    ----------
    B. Efron and R. J. Tibshirani, "An Introduction to the Bootstrap", Chapman & Hall, 1993.
    """
    counts = np.asarray(cell_counts, dtype=np.int64)
    out = np.zeros((n_boot, *counts.shape), dtype=np.int64)
    totals = counts.sum(axis=1)
    for g in range(counts.shape[0]):  # one draw per group, not per case
        if totals[g] > 0:
            out[:, g, :] = rng.multinomial(totals[g], counts[g] / totals[g], size=n_boot)
    return out


def percentile_interval(draws: FloatArray, level: float = 0.95) -> tuple[FloatArray, FloatArray]:
    """Percentile bootstrap interval along the first axis, ignoring NaN replicates.

    Columns whose replicates are all NaN get NaN bounds.
    """
    alpha = (1.0 - level) / 2.0
    arr = np.asarray(draws, dtype=float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN columns -> NaN, on purpose
        low = np.nanquantile(arr, alpha, axis=0)
        high = np.nanquantile(arr, 1.0 - alpha, axis=0)
    return np.asarray(low, dtype=float), np.asarray(high, dtype=float)


def katz_ratio_interval(
    k1: ArrayLike, n1: ArrayLike, k2: ArrayLike, n2: ArrayLike, level: float = 0.95
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Ratio of two independent proportions (k1/n1) / (k2/n2) with Katz's log interval.

    exp(log r ± z·se), se² = 1/k1 − 1/n1 + 1/k2 − 1/n2 (vectorised). Where a count is 0 or a
    denominator is 0 the log interval does not exist and both bounds are NaN; use
    :func:`score_ratio_interval` there.

    References
    ----------
    D. Katz, J. Baptista, S. P. Azen and M. C. Pike, "Obtaining confidence intervals for the
    risk ratio in cohort studies", Biometrics 34 (1978) 469-474 (their method C).
    """
    a, m, b, n = (np.asarray(v, dtype=float) for v in (k1, n1, k2, n2))
    z = z_value(level)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = (a / m) / (b / n)
        se = np.sqrt(1.0 / a - 1.0 / m + 1.0 / b - 1.0 / n)
        ok = (a > 0) & (b > 0) & (m > 0) & (n > 0)
        low = np.where(ok, ratio * np.exp(-z * se), np.nan)
        high = np.where(ok, ratio * np.exp(z * se), np.nan)
        ratio = np.where((m > 0) & (n > 0) & (b > 0), ratio, np.nan)
    return np.asarray(ratio, dtype=float), np.asarray(low), np.asarray(high)


def _score_z2(theta: float, k1: float, n1: float, k2: float, n2: float) -> float:
    """Koopman's score statistic (squared) for H0: p1 / p2 = theta."""
    a = theta * (n1 + n2)
    b = -(theta * (n1 + k2) + k1 + n2)
    c = k1 + k2
    disc = max(b * b - 4.0 * a * c, 0.0)
    p2 = (-b - np.sqrt(disc)) / (2.0 * a)
    p1 = theta * p2
    var = p1 * (1.0 - p1) / n1 + theta * theta * p2 * (1.0 - p2) / n2
    diff = k1 / n1 - theta * k2 / n2
    if var <= 0:
        return 0.0 if diff == 0 else float("inf")
    return float(diff * diff / var)


def score_ratio_interval(
    k1: int, n1: int, k2: int, n2: int, level: float = 0.95
) -> tuple[float, float]:
    """Koopman's score interval for a ratio of two independent proportions.

    The set of ratios theta that the score test of p1 = theta·p2 (constrained maximum
    likelihood under the null) does not reject. It exists when a count is 0, where Katz's log
    interval does not: with k1 = 0 the lower bound is 0, with k2 = 0 the upper bound is
    infinite. Both bounds NaN when k1 = k2 = 0 or a denominator is 0.

    References
    ----------
    P. A. R. Koopman, "Confidence intervals for the ratio of two binomial proportions",
    Biometrics 40 (1984) 513-517. O. Miettinen and M. Nurminen, Statistics in Medicine 4
    (1985) 213-226 (the same statistic with a factor N/(N−1), not used here).
    """
    from scipy.optimize import brentq

    if n1 <= 0 or n2 <= 0 or (k1 == 0 and k2 == 0):
        return np.nan, np.nan
    crit = z_value(level) ** 2
    est = (k1 / n1) / (k2 / n2) if k2 > 0 else float("inf")

    def f(log_theta: float) -> float:
        return _score_z2(float(np.exp(log_theta)), k1, n1, k2, n2) - crit

    def bound(start: float, step: float) -> float:
        x0, x1 = start, start + step
        for _ in range(200):
            if f(x1) > 0:
                return float(np.exp(brentq(f, x0, x1, xtol=1e-12)))
            x0, x1 = x1, x1 + step
        return 0.0 if step < 0 else float("inf")

    if k1 == 0:
        centre = np.log(0.5 / n1) - np.log(k2 / n2)
        return 0.0, bound(centre, 0.5) if f(centre) <= 0 else np.nan
    if k2 == 0:
        centre = np.log(k1 / n1) - np.log(0.5 / n2)
        return bound(centre, -0.5) if f(centre) <= 0 else np.nan, float("inf")
    centre = float(np.log(est))
    return bound(centre, -0.5), bound(centre, 0.5)


def ratio_interval(
    k1: int, n1: int, k2: int, n2: int, level: float = 0.95
) -> tuple[float, float, str]:
    """Katz's log interval for (k1/n1)/(k2/n2), or Koopman's score interval where a count is 0.

    Returns (low, high, method) with method "katz-log", "koopman-score" or "none".
    """
    _, lo, hi = katz_ratio_interval(k1, n1, k2, n2, level)
    if np.isfinite(lo) and np.isfinite(hi):
        return float(lo), float(hi), "katz-log"
    slo, shi = score_ratio_interval(k1, n1, k2, n2, level)
    if np.isnan(slo) and np.isnan(shi):
        return np.nan, np.nan, "none"
    return slo, shi, "koopman-score"


def newcombe_difference_interval(
    k1: ArrayLike, n1: ArrayLike, k2: ArrayLike, n2: ArrayLike, level: float = 0.95
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Difference of two independent proportions k1/n1 − k2/n2 with Newcombe's hybrid score
    interval (vectorised): it combines the two Wilson intervals (l_i, u_i) as
    d − √((p1 − l1)² + (u2 − p2)²) to d + √((u1 − p1)² + (p2 − l2)²).

    References
    ----------
    R. G. Newcombe, "Interval estimation for the difference between independent proportions:
    comparison of eleven methods", Statistics in Medicine 17 (1998) 873-890 (method 10).
    """
    p1 = proportion(k1, n1)
    p2 = proportion(k2, n2)
    l1, u1 = wilson_interval(k1, n1, level)
    l2, u2 = wilson_interval(k2, n2, level)
    d = p1 - p2
    low = d - np.sqrt((p1 - l1) ** 2 + (u2 - p2) ** 2)
    high = d + np.sqrt((u1 - p1) ** 2 + (p2 - l2) ** 2)
    return np.asarray(d), np.asarray(low), np.asarray(high)
