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
