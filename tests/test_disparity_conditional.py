"""Conditional disparity: odds ratios of override directions at equal margin."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.formula.api as smf
from sklearn.linear_model import LogisticRegression

from closecall.reports.disparity.conditional import FIRTH, conditional_disparity
from disparity_sim import review_table


def test_odds_ratio_matches_statsmodels_formula_fit() -> None:
    # Reference: statsmodels' formula interface (patsy design, Treatment coding) on the same
    # risk set; and the Wald interval exp(b ± 1.96 se).
    reviews = review_table(1500, 4, bias=2.0, groups=("A", "B", "C"), shares=(0.5, 0.3, 0.2))
    fit = conditional_disparity(reviews, "to_unfavourable", reference_group="A")
    assert fit.fitted
    risk = reviews[(reviews["model_decision"] == "favourable") & reviews["final_decision"].notna()]
    risk = risk.assign(y=(risk["final_decision"] == "unfavourable").astype(float))
    ref = smf.logit("y ~ margin + C(group, Treatment('A'))", data=risk).fit(disp=0)
    rows = {r.group: r for r in fit.rows}
    for g in ("B", "C"):
        name = f"C(group, Treatment('A'))[T.{g}]"
        assert rows[g].odds_ratio == pytest.approx(math.exp(ref.params[name]), rel=1e-6)
        lo, hi = np.exp(ref.conf_int().loc[name])
        assert rows[g].low == pytest.approx(lo, rel=1e-6)
        assert rows[g].high == pytest.approx(hi, rel=1e-6)
        assert rows[g].p_value == pytest.approx(ref.pvalues[name], rel=1e-6)
    assert fit.margin_odds_ratio == pytest.approx(math.exp(ref.params["margin"]), rel=1e-6)


def test_odds_ratio_matches_scikit_learn_unpenalised() -> None:
    # A second, independent reference for the point estimate: scikit-learn without penalty.
    reviews = review_table(1200, 9, bias=2.0)
    fit = conditional_disparity(reviews, "to_unfavourable", reference_group="A")
    risk = reviews[(reviews["model_decision"] == "favourable") & reviews["final_decision"].notna()]
    x = np.column_stack([risk["margin"], (risk["group"] == "B").astype(float)])
    y = (risk["final_decision"] == "unfavourable").to_numpy()
    lr = LogisticRegression(C=np.inf, tol=1e-10, max_iter=1000).fit(x, y)
    b = next(r for r in fit.rows if r.group == "B")
    assert b.odds_ratio == pytest.approx(math.exp(lr.coef_[0][1]), rel=1e-4)


@pytest.mark.slow
def test_injected_bias_recovered_within_interval_at_nominal_rate() -> None:
    # Group B overridden to unfavourable with twice the odds at equal margin (bias = 2). The
    # 95 % interval should cover 2 in about 95 % of simulated ledgers, and the estimate should
    # centre on log 2.
    covered, logs, reps = 0, [], 150
    for seed in range(reps):
        fit = conditional_disparity(review_table(800, 100 + seed, bias=2.0), "to_unfavourable")
        b = next(r for r in fit.rows if r.group == "B")
        assert fit.fitted and b.low is not None and b.high is not None and b.odds_ratio
        covered += b.low <= 2.0 <= b.high
        logs.append(math.log(b.odds_ratio))
    assert 0.89 <= covered / reps <= 0.995
    assert np.mean(logs) == pytest.approx(math.log(2.0), abs=0.08)


@pytest.mark.slow
def test_unbiased_ledger_not_flagged_beyond_nominal_rate() -> None:
    # No bias: the Wald test of group B's coefficient should reject at about 5 %.
    rejections, reps = 0, 200
    for seed in range(reps):
        fit = conditional_disparity(review_table(600, 5000 + seed, bias=1.0), "to_unfavourable")
        b = next(r for r in fit.rows if r.group == "B")
        rejections += b.p_value is not None and b.p_value < 0.05
    assert rejections / reps <= 0.09


def test_no_events_is_a_note_not_a_crash() -> None:
    reviews = review_table(200, 1, base_rate=0.2)
    reviews["action"] = "uphold"
    reviews["final_decision"] = reviews["model_decision"]
    fit = conditional_disparity(reviews, "to_unfavourable")
    assert not fit.fitted
    assert any("no overrides" in n for n in fit.notes)
    assert all(r.odds_ratio is None for r in fit.rows)


def test_group_without_events_is_estimated_by_firth_not_dropped() -> None:
    # Separation (Albert & Anderson 1984): group C has no override to unfavourable, so its
    # maximum-likelihood odds ratio is 0. Firth's penalised likelihood gives a finite estimate
    # below 1 with a profile interval whose upper end is finite; the note names C.
    reviews = review_table(900, 2, bias=1.0, groups=("A", "B", "C"), shares=(0.45, 0.45, 0.1))
    c_fav = (reviews["group"] == "C") & (reviews["model_decision"] == "favourable")
    reviews.loc[c_fav, "action"] = "uphold"
    reviews.loc[c_fav, "final_decision"] = "favourable"
    fit = conditional_disparity(reviews, "to_unfavourable")
    assert fit.fitted and fit.estimation == FIRTH
    c = next(r for r in fit.rows if r.group == "C")
    assert c.events == 0 and c.odds_ratio is not None and 0 < c.odds_ratio < 1
    assert c.low is not None and c.high is not None and 0 < c.low < c.odds_ratio < c.high < 10
    assert c.p_value is not None and 0 < c.p_value < 1
    assert any("group C" in n and "separation" in n and "Firth" in n for n in fit.notes)


def test_two_groups_one_without_events_are_still_compared() -> None:
    reviews = review_table(400, 3)
    b_fav = (reviews["group"] == "B") & (reviews["model_decision"] == "favourable")
    reviews.loc[b_fav, "action"] = "uphold"
    reviews.loc[b_fav, "final_decision"] = "favourable"
    fit = conditional_disparity(reviews, "to_unfavourable")
    assert fit.fitted and fit.estimation == FIRTH and fit.reference_group == "A"
    b = next(r for r in fit.rows if r.group == "B")
    assert b.odds_ratio is not None and b.odds_ratio < 1 and b.high is not None


def test_few_events_warn_per_common_practice() -> None:
    fit = conditional_disparity(review_table(120, 8, bias=2.0), "to_unfavourable")
    assert any("per coefficient" in n for n in fit.notes)


def test_unknown_reference_group_is_reported() -> None:
    fit = conditional_disparity(review_table(300, 1), reference_group="Z")
    assert not fit.fitted and any("'Z'" in n for n in fit.notes)


def test_to_favourable_uses_model_unfavourable_risk_set() -> None:
    reviews = review_table(600, 12)
    fit = conditional_disparity(reviews, "to_favourable")
    risk = reviews[
        (reviews["model_decision"] == "unfavourable") & reviews["final_decision"].notna()
    ]
    assert fit.at_risk == len(risk)
    assert fit.events == int((risk["final_decision"] == "favourable").sum())
