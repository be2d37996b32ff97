"""Correction for the many tests one report runs: Holm (family-wise) and Benjamini–Hochberg.

A report that runs twenty tests finds about one "significant" difference by chance at 5 %. Each
family of tests below is named with what it holds, and every p-value in it gets two adjusted
values: Holm's, which keeps the chance of *any* false finding in the family at most α, and
Benjamini–Hochberg's, which keeps the expected *share* of false findings among the flagged ones
at most α. A test counts as flagged after correction when its Holm-adjusted p is below α.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

#: Level at which a corrected test is reported as flagged.
FAMILY_ALPHA = 0.05


def holm(p: ArrayLike) -> NDArray[np.float64]:
    """Holm's step-down adjusted p-values (vectorised; NaN stay NaN and are not counted).

    References
    ----------
    S. Holm, "A simple sequentially rejective multiple test procedure", Scandinavian Journal
    of Statistics 6 (1979) 65-70.
    """
    arr = np.asarray(p, dtype=float)
    out = np.full(arr.shape, np.nan)
    ok = np.flatnonzero(np.isfinite(arr))
    m = len(ok)
    if m == 0:
        return out
    order = ok[np.argsort(arr[ok], kind="stable")]
    scaled = (m - np.arange(m)) * arr[order]
    out[order] = np.minimum(np.maximum.accumulate(scaled), 1.0)
    return out


def benjamini_hochberg(p: ArrayLike) -> NDArray[np.float64]:
    """Benjamini–Hochberg step-up adjusted p-values (vectorised; NaN stay NaN).

    References
    ----------
    Y. Benjamini and Y. Hochberg, "Controlling the false discovery rate: a practical and
    powerful approach to multiple testing", JRSS B 57 (1995) 289-300.
    """
    arr = np.asarray(p, dtype=float)
    out = np.full(arr.shape, np.nan)
    ok = np.flatnonzero(np.isfinite(arr))
    m = len(ok)
    if m == 0:
        return out
    order = ok[np.argsort(arr[ok], kind="stable")]
    scaled = arr[order] * m / np.arange(1, m + 1)
    out[order] = np.minimum(np.minimum.accumulate(scaled[::-1])[::-1], 1.0)
    return out


@dataclass(frozen=True)
class FamilyMember:
    """One test of a family with its raw and adjusted p-values."""

    section: str
    name: str
    p_value: float | None
    holm: float | None
    bh: float | None
    flagged: bool  # Holm-adjusted p below the family's alpha


@dataclass(frozen=True)
class Family:
    """A stated family of tests corrected together."""

    name: str
    holds: str  # plain words: which tests are in it
    alpha: float
    tests: tuple[FamilyMember, ...]
    raw_below_alpha: int
    flagged: int  # after Holm
    flagged_bh: int  # after Benjamini–Hochberg


def correct_family(
    name: str,
    holds: str,
    tests: Sequence[tuple[str, str, float | None]],
    alpha: float = FAMILY_ALPHA,
) -> Family:
    """Holm and Benjamini–Hochberg adjustments over ``(section, test name, p)`` triples.

    Tests without a p-value (not run) are listed but not counted in the family size.
    """
    p = np.array([np.nan if t[2] is None else float(t[2]) for t in tests], dtype=float)
    h = holm(p)
    b = benjamini_hochberg(p)
    rows = tuple(
        FamilyMember(
            section=s,
            name=n,
            p_value=None if not np.isfinite(p[i]) else float(p[i]),
            holm=None if not np.isfinite(h[i]) else float(h[i]),
            bh=None if not np.isfinite(b[i]) else float(b[i]),
            flagged=bool(np.isfinite(h[i]) and h[i] < alpha),
        )
        for i, (s, n, _) in enumerate(tests)
    )
    return Family(
        name=name,
        holds=holds,
        alpha=alpha,
        tests=rows,
        raw_below_alpha=int(np.sum(np.isfinite(p) & (p < alpha))),
        flagged=int(np.sum(np.isfinite(h) & (h < alpha))),
        flagged_bh=int(np.sum(np.isfinite(b) & (b < alpha))),
    )
