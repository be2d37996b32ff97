"""Tests of independence between group and an outcome of review, with honest small-cell rules."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats

#: Cochran's rule for the chi-square approximation (common practice): no expected count below 1
#: and at most a fifth of expected counts below 5.
MIN_EXPECTED = 5.0
MAX_SHARE_BELOW = 0.2
#: Below this many cases in the rarer column a 2×2 test gets a low-power note (common practice).
FEW_EVENTS = 10


@dataclass(frozen=True)
class IndependenceTest:
    """One test of "this outcome of review is independent of the group".

    ``method`` is "fisher-exact" (2×2 tables), "chi-square" (larger tables whose expected counts
    allow it), "fisher-monte-carlo" (larger tables whose expected counts do not), or "not run"
    (the table cannot carry a test; ``note`` says why).
    """

    name: str
    method: str
    rows: tuple[str, ...]
    columns: tuple[str, ...]
    table: tuple[tuple[int, ...], ...]
    statistic: float | None  # odds ratio (Fisher 2×2) or chi-square statistic
    statistic_name: str | None
    dof: int | None
    p_value: float | None
    min_expected: float | None
    note: str | None


def independence_test(
    name: str,
    table: ArrayLike,
    rows: tuple[str, ...],
    columns: tuple[str, ...],
    *,
    seed: int = 0,
    n_resamples: int = 9999,
) -> IndependenceTest:
    """Test group × outcome independence on a contingency table of counts.

    A 2×2 table gets Fisher's exact test (two-sided; statistic is the sample odds ratio).
    A larger table gets Pearson's chi-square test when Cochran's rule holds, otherwise a
    seeded Monte Carlo version of Fisher's exact test (Freeman-Halton), and the note says so.
    Rows or columns with no counts are dropped first; a table left smaller than 2×2 is not
    tested.

    References
    ----------
    R. A. Fisher, "On the interpretation of χ² from contingency tables, and the calculation of
    P", JRSS 85 (1922) 87-94. G. H. Freeman and J. H. Halton, Biometrika 38 (1951) 141-149.
    W. G. Cochran, "Some methods for strengthening the common χ² tests", Biometrics 10 (1954)
    417-451.
    """
    full = np.asarray(table, dtype=np.int64)
    keep_r = full.sum(axis=1) > 0
    keep_c = full.sum(axis=0) > 0
    t = full[keep_r][:, keep_c]
    frozen = tuple(tuple(int(v) for v in r) for r in full)
    base: dict[str, Any] = {"name": name, "rows": rows, "columns": columns, "table": frozen}
    if t.shape[0] < 2 or t.shape[1] < 2:
        return _not_run(base, t, columns, keep_c)
    expected = stats.contingency.expected_freq(t)
    min_exp = float(expected.min())
    dropped = _dropped_note(rows, keep_r)
    if t.shape == (2, 2):
        kept_rows = [r for r, k in zip(rows, keep_r, strict=True) if k]
        return _fisher_2x2(base, t, kept_rows, min_exp, dropped)
    share_below = float((expected < MIN_EXPECTED).mean())
    if min_exp >= 1.0 and share_below <= MAX_SHARE_BELOW:
        chi2, p, dof, _ = stats.chi2_contingency(t, correction=False)
        return IndependenceTest(
            **base,
            method="chi-square",
            statistic=float(chi2),
            statistic_name="chi-square",
            dof=int(dof),
            p_value=float(p),
            min_expected=min_exp,
            note=dropped,
        )
    res = stats.fisher_exact(
        t,
        method=stats.MonteCarloMethod(n_resamples=n_resamples, rng=np.random.default_rng(seed)),
    )
    note = (
        f"chi-square not used: {share_below:.0%} of expected counts are below 5 and the "
        f"smallest is {min_exp:.2f} (Cochran's rule, common practice); Fisher's exact test "
        f"by {n_resamples} Monte Carlo tables used instead"
    )
    return IndependenceTest(
        **base,
        method="fisher-monte-carlo",
        statistic=None,
        statistic_name=None,
        dof=None,
        p_value=float(res.pvalue),
        min_expected=min_exp,
        note=note if dropped is None else f"{note}; {dropped}",
    )


def _not_run(
    base: dict[str, Any], t: np.ndarray, columns: tuple[str, ...], keep_c: np.ndarray
) -> IndependenceTest:
    """No test: the table left after dropping empty rows and columns is smaller than 2×2."""
    why = (
        f"every case falls in one column ({', '.join(np.asarray(columns)[keep_c])})"
        if t.shape[1] < 2
        else "fewer than two groups have cases"
    )
    return IndependenceTest(
        **base,
        method="not run",
        statistic=None,
        statistic_name=None,
        dof=None,
        p_value=None,
        min_expected=None,
        note=f"no test: {why}",
    )


def _fisher_2x2(
    base: dict[str, Any],
    t: np.ndarray,
    kept_rows: list[str],
    min_exp: float,
    dropped: str | None,
) -> IndependenceTest:
    """Fisher's exact test of a 2×2 table, noting a rare column it can hardly detect in."""
    res = stats.fisher_exact(t, alternative="two-sided")
    smaller = int(t.sum(axis=0).min())
    if smaller < FEW_EVENTS:
        few = (
            f"only {smaller} case(s) in the rarer column: the exact test is valid but can "
            "detect only very large differences"
        )
        dropped = few if dropped is None else f"{few}; {dropped}"
    return IndependenceTest(
        **base,
        method="fisher-exact",
        statistic=float(res.statistic),
        statistic_name=f"odds ratio {kept_rows[0]} vs {kept_rows[1]}",
        dof=None,
        p_value=float(res.pvalue),
        min_expected=min_exp,
        note=dropped,
    )


def _dropped_note(rows: tuple[str, ...], keep: np.ndarray) -> str | None:
    gone = [r for r, k in zip(rows, keep, strict=True) if not k]
    return f"left out (no cases): {', '.join(gone)}" if gone else None
