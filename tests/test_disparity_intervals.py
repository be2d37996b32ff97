"""Intervals for ratios and differences of proportions, power lines and multiple-test
corrections, each against an outside reference named beside it."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.stats.contingency import relative_risk
from statsmodels.stats.contingency_tables import mcnemar
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.power import GofChisquarePower, NormalIndPower
from statsmodels.stats.proportion import confint_proportions_2indep

from closecall.reports.disparity.intervals import (
    katz_ratio_interval,
    newcombe_difference_interval,
    ratio_interval,
    score_ratio_interval,
)
from closecall.reports.disparity.multiplicity import benjamini_hochberg, correct_family, holm
from closecall.reports.disparity.power import (
    cohen_h_detectable,
    cohen_w_detectable,
    detectable_odds_ratio,
    detectable_split,
)

TABLES = [(30, 100, 50, 100), (3, 17, 40, 61), (120, 900, 410, 1400), (1, 5, 4, 5)]


@pytest.mark.parametrize(("k1", "n1", "k2", "n2"), TABLES)
def test_katz_log_interval_matches_scipy_and_statsmodels(
    k1: int, n1: int, k2: int, n2: int
) -> None:
    # References: scipy.stats.contingency.relative_risk (documented as Katz et al. 1978,
    # method C) and statsmodels confint_proportions_2indep(compare="ratio", method="log").
    r, lo, hi = katz_ratio_interval(k1, n1, k2, n2, 0.95)
    ci = relative_risk(k1, n1, k2, n2).confidence_interval(0.95)
    assert float(r) == pytest.approx(relative_risk(k1, n1, k2, n2).relative_risk)
    assert (float(lo), float(hi)) == pytest.approx((ci.low, ci.high), rel=1e-10)
    sm = confint_proportions_2indep(k1, n1, k2, n2, method="log", compare="ratio")
    assert (float(lo), float(hi)) == pytest.approx(sm, rel=1e-10)


@pytest.mark.filterwarnings("ignore:divide by zero:RuntimeWarning")  # inside statsmodels
@pytest.mark.parametrize(("k1", "n1", "k2", "n2"), [*TABLES, (0, 40, 10, 60), (7, 40, 0, 60)])
def test_koopman_score_interval_matches_statsmodels(k1: int, n1: int, k2: int, n2: int) -> None:
    # Reference: statsmodels confint_proportions_2indep(compare="ratio", method="score",
    # correction=False), the score interval without Miettinen–Nurminen's N/(N-1) factor,
    # which is Koopman's (1984).
    lo, hi = score_ratio_interval(k1, n1, k2, n2, 0.95)
    ref = confint_proportions_2indep(
        k1, n1, k2, n2, method="score", compare="ratio", correction=False
    )
    assert lo == pytest.approx(max(float(ref[0]), 0.0), abs=1e-7)
    if np.isinf(ref[1]):
        assert np.isinf(hi)
    else:
        assert hi == pytest.approx(float(ref[1]), rel=1e-7)


def test_zero_count_falls_back_from_katz_to_koopman() -> None:
    _, lo, hi = katz_ratio_interval(0, 40, 10, 60)
    assert np.isnan(lo) and np.isnan(hi)  # log(0): Katz's interval does not exist
    lo, hi, how = ratio_interval(0, 40, 10, 60)
    assert how == "koopman-score" and lo == 0.0 and 0 < hi < 1
    assert ratio_interval(30, 100, 50, 100)[2] == "katz-log"


@pytest.mark.parametrize(("k1", "n1", "k2", "n2"), [*TABLES, (0, 30, 4, 30)])
def test_newcombe_difference_matches_statsmodels(k1: int, n1: int, k2: int, n2: int) -> None:
    # Reference: statsmodels confint_proportions_2indep(compare="diff", method="newcomb")
    # (Newcombe 1998, method 10).
    d, lo, hi = newcombe_difference_interval(k1, n1, k2, n2, 0.95)
    ref = confint_proportions_2indep(k1, n1, k2, n2, method="newcomb", compare="diff")
    assert float(d) == pytest.approx(k1 / n1 - k2 / n2)
    assert (float(lo), float(hi)) == pytest.approx(ref, abs=1e-12)


def test_power_lines_match_statsmodels() -> None:
    # Reference: statsmodels.stats.power NormalIndPower (Cohen's h) and GofChisquarePower
    # (Cohen's w; n_bins = df + 1). Our h ignores the far rejection tail (Cohen 1988), which
    # moves the answer by less than 1e-4 at these sizes.
    for n1, n2 in ((100, 80), (30, 300), (1000, 1000)):
        ref = NormalIndPower().solve_power(None, nobs1=n1, ratio=n2 / n1, alpha=0.05, power=0.8)
        assert float(cohen_h_detectable(n1, n2)) == pytest.approx(ref, abs=1e-4)
    for n, df in ((300, 1), (300, 3), (80, 2)):
        ref = GofChisquarePower().solve_power(None, nobs=n, alpha=0.05, power=0.8, n_bins=df + 1)
        assert cohen_w_detectable(n, df) == pytest.approx(
            ref, rel=1e-4
        )  # its root-finder tolerance


def test_detectable_odds_ratio_has_the_stated_power() -> None:
    # Wald test of log OR with standard error se: at log OR = (z_.975 + z_.8)·se the
    # rejection probability is Φ(z_.8) + Φ(−z_.975 − … ) ≈ 0.80 (scipy normal).
    se = 0.37
    d = detectable_odds_ratio(se)
    assert d.upper is not None and d.lower is not None
    shift = np.log(d.upper) / se
    z = stats.norm.ppf(0.975)
    power = stats.norm.sf(z - shift) + stats.norm.cdf(-z - shift)
    assert power == pytest.approx(0.8, abs=1e-3)
    assert d.lower == pytest.approx(1 / d.upper)


@pytest.mark.parametrize("discordant", [12, 30, 75])
def test_mcnemar_power_line_recomputed_with_statsmodels(discordant: int) -> None:
    # The split q the line names: the exact test (statsmodels mcnemar, exact=True) rejects
    # with probability 0.8 when a share q of the discordant pairs go one way (scipy binom).
    d = detectable_split(discordant)
    assert d.upper is not None
    k = np.arange(discordant + 1)
    reject = np.array(
        [mcnemar([[0, i], [discordant - i, 0]], exact=True).pvalue <= 0.05 for i in k]
    )
    power = stats.binom.pmf(k[reject], discordant, d.upper).sum()
    assert power == pytest.approx(0.8, abs=1e-6)


def test_mcnemar_power_line_says_when_nothing_is_detectable() -> None:
    assert detectable_split(4).upper is None  # 2·0.5⁴ = 0.125 > 0.05: never significant
    assert "cannot reach" in detectable_split(4).text


def test_holm_and_benjamini_hochberg_match_statsmodels() -> None:
    # Reference: statsmodels.stats.multitest.multipletests(method="holm" / "fdr_bh").
    rng = np.random.default_rng(3)
    for _ in range(20):
        p = rng.uniform(0, 0.3, rng.integers(1, 25))
        p[rng.random(len(p)) < 0.2] = rng.uniform(0, 0.001)
        assert holm(p) == pytest.approx(multipletests(p, method="holm")[1])
        assert benjamini_hochberg(p) == pytest.approx(multipletests(p, method="fdr_bh")[1])


def test_tests_without_a_p_value_are_listed_but_not_counted() -> None:
    fam = correct_family("f", "three tests", [("s", "a", 0.01), ("s", "b", None), ("s", "c", 0.04)])
    assert [t.holm for t in fam.tests] == pytest.approx([0.02, None, 0.04])  # m = 2, not 3
    assert fam.flagged == 2 and fam.raw_below_alpha == 2
