"""Override rates by group and the tests of override × group."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from closecall.reports.disparity.contingency import independence_test
from closecall.reports.disparity.overrides import override_rates
from disparity_sim import review_table, table_from_counts


def test_two_by_two_matches_scipy_fisher_exact() -> None:
    # Reference: scipy.stats.fisher_exact (two-sided, sample odds ratio).
    table = np.array([[8, 92], [19, 81]])
    res = independence_test("t", table, ("A", "B"), ("overridden", "upheld"))
    ref = stats.fisher_exact(table)
    assert res.method == "fisher-exact"
    assert res.p_value == pytest.approx(ref.pvalue, rel=1e-12)
    assert res.statistic == pytest.approx((8 * 81) / (92 * 19))
    assert res.statistic_name == "odds ratio A vs B"


def test_larger_table_uses_chi_square_matching_statsmodels() -> None:
    # Reference: statsmodels Table.test_nominal_association (Pearson chi-square).
    table = np.array([[30, 170], [45, 155], [20, 80]])
    res = independence_test("t", table, ("A", "B", "C"), ("o", "u"))
    ref = sm.stats.Table(table).test_nominal_association()
    assert res.method == "chi-square"
    assert res.statistic == pytest.approx(ref.statistic, rel=1e-10)
    assert res.p_value == pytest.approx(ref.pvalue, rel=1e-8)
    assert res.dof == ref.df == 2


def _freeman_halton_k_by_2(table: np.ndarray) -> float:
    """Exact p of a k×2 table by enumeration (Freeman & Halton, Biometrika 1951): the sum of
    the probabilities, under the multivariate hypergeometric law with both margins fixed, of
    every table no more probable than the observed one."""
    rows = table.sum(axis=1)
    c1 = int(table[:, 0].sum())
    total = math.comb(int(rows.sum()), c1)

    def prob(x: tuple[int, ...]) -> float:
        return math.prod(math.comb(int(r), k) for r, k in zip(rows, x, strict=True)) / total

    p_obs = prob(tuple(int(v) for v in table[:, 0]))
    p = 0.0
    for x in itertools.product(*(range(int(r) + 1) for r in rows)):
        if sum(x) == c1:
            px = prob(x)
            if px <= p_obs * (1 + 1e-7):
                p += px
    return p


def test_small_cells_refuse_chi_square_and_say_so() -> None:
    # Expected counts below 5 in most cells: Cochran's rule (common practice) rules out the
    # chi-square approximation; the exact test is run by Monte Carlo and checked here against
    # full enumeration.
    table = np.array([[3, 9], [0, 11], [4, 6]])
    res = independence_test("t", table, ("A", "B", "C"), ("o", "u"), seed=3, n_resamples=20000)
    assert res.method == "fisher-monte-carlo"
    assert res.note is not None and "Cochran" in res.note and "below 5" in res.note
    exact = _freeman_halton_k_by_2(table)
    assert res.p_value == pytest.approx(exact, abs=0.012)


def test_degenerate_table_is_not_tested() -> None:
    res = independence_test("t", np.array([[0, 10], [0, 12]]), ("A", "B"), ("o", "u"))
    assert res.method == "not run"
    assert res.p_value is None
    assert res.note is not None and "one column" in res.note


def test_empty_group_is_dropped_and_named() -> None:
    res = independence_test("t", np.array([[5, 10], [0, 0], [7, 3]]), ("A", "B", "C"), ("o", "u"))
    assert res.method == "fisher-exact"
    assert res.note is not None and "B" in res.note
    assert res.p_value == pytest.approx(stats.fisher_exact([[5, 10], [7, 3]]).pvalue)


def test_override_counts_and_risk_sets() -> None:
    reviews = table_from_counts({"A": (40, 10, 5, 45), "B": (20, 20, 2, 58)})
    res = override_rates(reviews)
    a, b = res.rows
    assert (a.group, a.decided, a.overridden, a.upheld) == ("A", 100, 15, 85)
    assert a.to_unfavourable == 10 and a.model_favourable == 50
    assert a.to_unfavourable_rate == pytest.approx(0.2)
    assert b.to_favourable == 2 and b.model_unfavourable == 60
    assert b.to_favourable_rate == pytest.approx(2 / 60)
    any_test, unf_test, fav_test = res.tests
    assert any_test.p_value == pytest.approx(stats.fisher_exact([[15, 85], [22, 78]]).pvalue)
    assert unf_test.p_value == pytest.approx(stats.fisher_exact([[10, 40], [20, 20]]).pvalue)
    assert fav_test.p_value == pytest.approx(stats.fisher_exact([[5, 45], [2, 58]]).pvalue)
    assert a.override_low < a.override_rate < a.override_high


def test_override_to_the_models_own_decision_counts_as_upheld() -> None:
    reviews = table_from_counts({"A": (10, 0, 0, 10), "B": (10, 0, 0, 10)})
    reviews.loc[0, "action"] = "override-favourable"  # model already favourable
    res = override_rates(reviews)
    assert res.rows[0].overridden == 0


@pytest.mark.slow
def test_unbiased_reviews_are_not_flagged_beyond_the_nominal_rate() -> None:
    # Under no bias, a valid 5 % test rejects in at most about 5 % of samples (Fisher's exact
    # test is conservative). 300 samples: binomial sd at 5 % is 1.3 %, so 8 % is ~2.3 sd slack.
    rejections = 0
    for seed in range(300):
        res = override_rates(review_table(300, seed, bias=1.0))
        rejections += res.tests[1].p_value is not None and res.tests[1].p_value < 0.05
    assert rejections / 300 <= 0.08


def test_injected_bias_is_detected_with_enough_reviews() -> None:
    # Reviewers override group B to unfavourable with 4 times the odds at equal margin.
    res = override_rates(review_table(2000, 1, bias=4.0))
    assert res.tests[1].p_value is not None and res.tests[1].p_value < 0.001
    a, b = res.rows
    assert b.to_unfavourable_rate > a.to_unfavourable_rate
