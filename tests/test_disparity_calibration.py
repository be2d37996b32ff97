"""Calibration and error rates by group on held-out scores, against statsmodels and scipy."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import optimize, stats
from scipy.special import expit, logit
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

from closecall.reports.disparity.calibration import calibration_by_group
from closecall.reports.disparity.heldout import held_out_error_rates

LENSES = [("equal", 0.5), ("cautious", 0.6)]


def history(seed: int, n: int = 6000, slope_b: float = 0.7, shift_b: float = 0.0):
    """Held-out log-odds η; outcomes drawn from logit P = η for group A and
    shift_b + slope_b·η for group B (the known truth)."""
    rng = np.random.default_rng(seed)
    g = (rng.random(n) < 0.4).astype(np.int64)
    eta = rng.normal(0.2, 1.3, n)
    true = np.where(g == 1, shift_b + slope_b * eta, eta)
    y = (rng.random(n) < expit(true)).astype(np.int8)
    return eta, y, g


def test_intercept_and_slope_match_statsmodels_glm() -> None:
    # Reference: statsmodels GLM (Binomial, logit link) of y on η with η as offset (the
    # calibration intercept) and of y on [1, η] (the slope), Wald 95 % intervals.
    eta, y, g = history(1)
    rep = calibration_by_group({"m": eta}, y, g, ["A", "B"], LENSES)
    for code, name in ((0, "A"), (1, "B")):
        row = next(r for r in rep.rows if r.group == name)
        s = g == code
        off = sm.GLM(y[s], np.ones((s.sum(), 1)), family=sm.families.Binomial(), offset=eta[s]).fit(
            tol=1e-13
        )
        full = sm.GLM(y[s], sm.add_constant(eta[s]), family=sm.families.Binomial()).fit(tol=1e-13)
        assert row.intercept == pytest.approx(off.params[0], abs=1e-8)
        assert (row.intercept_low, row.intercept_high) == pytest.approx(
            tuple(off.conf_int()[0]), abs=1e-7
        )
        assert row.slope == pytest.approx(full.params[1], abs=1e-8)
        assert (row.slope_low, row.slope_high) == pytest.approx(tuple(full.conf_int()[1]), abs=1e-7)
        # Wald test of b = 1 from the same fit
        z = (full.params[1] - 1) / full.bse[1]
        assert row.slope_p == pytest.approx(2 * stats.norm.sf(abs(z)), rel=1e-6)


def test_a_miscalibrated_group_is_detected_and_a_calibrated_one_is_not() -> None:
    # Known truth: group B's outcomes follow a slope of 0.7 on the model's log-odds, group A's
    # a slope of 1. Over 40 simulated histories the interval for B excludes 1 every time and
    # covers 0.7 at about the nominal rate; A is flagged at about 5 %.
    flagged_b = covered_b = flagged_a = 0
    reps = 40
    for seed in range(reps):
        eta, y, g = history(100 + seed)
        rep = calibration_by_group({"m": eta}, y, g, ["A", "B"], LENSES)
        a = next(r for r in rep.rows if r.group == "A")
        b = next(r for r in rep.rows if r.group == "B")
        flagged_b += "too extreme" in b.problems
        covered_b += b.slope_low <= 0.7 <= b.slope_high
        flagged_a += bool(a.problems)
    assert flagged_b == reps
    assert covered_b / reps >= 0.85
    assert flagged_a / reps <= 0.2  # two tests per group (intercept, slope) at 5 % each


def test_effective_threshold_solves_the_recalibration_equation() -> None:
    # p* with a + b·logit(p*) = logit(t), found here by scipy's root finder on the
    # statsmodels fit; and the calibrated probability at the model's own threshold.
    eta, y, g = history(3, shift_b=-0.3)
    rep = calibration_by_group({"m": eta}, y, g, ["A", "B"], LENSES)
    row = next(r for r in rep.rows if r.group == "B")
    s = g == 1
    a, b = sm.GLM(y[s], sm.add_constant(eta[s]), family=sm.families.Binomial()).fit().params
    for th, (_, t) in zip(row.thresholds, LENSES, strict=True):
        p_star = optimize.brentq(lambda p, t=t: a + b * logit(p) - logit(t), 1e-9, 1 - 1e-9)
        assert th.effective == pytest.approx(p_star, abs=1e-8)
        assert th.at_threshold == pytest.approx(expit(a + b * logit(t)), abs=1e-8)
        assert th.effective_low < th.effective < th.effective_high


def test_reliability_bins_count_by_hand() -> None:
    # Reference: pandas qcut into ten equal-count bins of η, observed rate per bin, and
    # statsmodels' Wilson interval.
    eta, y, g = history(4, n=2000)
    rep = calibration_by_group({"m": eta}, y, g, ["A", "B"], LENSES)
    row = next(r for r in rep.rows if r.group == "A")
    s = g == 0
    frame = pd.DataFrame({"bin": pd.qcut(eta[s], 10, labels=False), "y": y[s]})
    by = frame.groupby("bin")["y"].agg(["size", "sum"])
    assert [b.cases for b in row.bins] == by["size"].tolist()
    assert [b.observed for b in row.bins] == pytest.approx((by["sum"] / by["size"]).tolist())
    lo, hi = proportion_confint(by["sum"], by["size"], method="wilson")
    assert [b.low for b in row.bins] == pytest.approx(list(lo))
    assert [b.high for b in row.bins] == pytest.approx(list(hi))


def test_models_without_held_out_scores_are_named_not_calibrated() -> None:
    eta, y, g = history(5, n=500)
    rep = calibration_by_group(
        {"m": eta, "deployed": np.full(500, np.nan)}, y, g, ["A", "B"], LENSES
    )
    assert rep.models == ("m",)
    assert any("deployed" in n for n in rep.notes)


def test_held_out_error_rates_count_by_hand_with_gaps_against_statsmodels() -> None:
    # Counts by pandas crosstab; difference interval statsmodels newcomb, ratio interval
    # statsmodels log (Katz), p-value scipy fisher_exact.
    eta, y, g = history(6, n=3000)
    rep = held_out_error_rates({"m": eta}, y, g, ["A", "B"], LENSES)
    assert rep.reference_group == "A"  # the larger group
    for lens, t in LENSES:
        fav = eta > logit(t)
        for code, name in ((0, "A"), (1, "B")):
            row = next(r for r in rep.rows if r.lens == lens and r.group == name)
            s = g == code
            ff = int((fav & (y == 0) & s).sum())
            fu = int((~fav & (y == 1) & s).sum())
            assert (row.false_favourable.errors, row.false_favourable.cases) == (
                ff,
                int(((y == 0) & s).sum()),
            )
            assert (row.false_unfavourable.errors, row.false_unfavourable.cases) == (
                fu,
                int(((y == 1) & s).sum()),
            )
        b = next(r for r in rep.rows if r.lens == lens and r.group == "B")
        a = next(r for r in rep.rows if r.lens == lens and r.group == "A")
        assert b.ff_gap is not None and a.ff_gap is None
        k1, n1 = b.false_favourable.errors, b.false_favourable.cases
        k0, n0 = a.false_favourable.errors, a.false_favourable.cases
        d = confint_proportions_2indep(k1, n1, k0, n0, method="newcomb", compare="diff")
        r = confint_proportions_2indep(k1, n1, k0, n0, method="log", compare="ratio")
        assert (b.ff_gap.difference_low, b.ff_gap.difference_high) == pytest.approx(d)
        assert (b.ff_gap.ratio_low, b.ff_gap.ratio_high) == pytest.approx(r)
        p = stats.fisher_exact([[k1, n1 - k1], [k0, n0 - k0]]).pvalue
        assert b.ff_gap.p_value == pytest.approx(p)
