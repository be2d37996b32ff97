"""Simulated ledgers with a known truth: the reviewer-level tests recover a planted effect with
near-nominal coverage under clustering, and a null ledger is flagged at about the nominal rate
after correction. Each simulation is seeded."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from scipy.special import expit

from closecall.reports.disparity.conditional import conditional_disparity
from closecall.reports.disparity.overrides import override_rates
from closecall.reports.disparity.report import _families
from closecall.reports.disparity.reviewers import reviewer_tables
from closecall.reports.disparity.table import check_reviews
from disparity_sim import review_table

PHI = 0.8  # bridge parameter: reviewer intercepts shrink the marginal coefficients by PHI


def bridge(rng: np.random.Generator, phi: float, size: int) -> np.ndarray:
    """Random intercepts from the bridge distribution: with them, a conditional logistic model
    with coefficients β/φ has marginal (population-averaged) coefficients exactly β (Wang &
    Louis, "Matching conditional and marginal shapes in binary random intercept models using a
    bridge distribution function", Biometrika 90 (2003) 765-775; inverse CDF from memory, checked
    below by integration)."""
    u = rng.random(size)
    return np.log(np.sin(phi * np.pi * u) / np.sin(phi * np.pi * (1 - u))) / phi


def clustered_ledger(seed: int, reviewers: int = 40, per: int = 30) -> pd.DataFrame:
    """Model-favourable close calls, each reviewer with their own override propensity and
    their own share of group B; B overridden to unfavourable at twice the odds (marginally)."""
    rng = np.random.default_rng(seed)
    share = rng.beta(2, 3, reviewers)
    rev = np.repeat(np.arange(reviewers), per)
    b = rng.random(len(rev)) < share[rev]
    margin = rng.uniform(0, 0.5, len(rev))
    eta = (-1.0 - 2.0 * margin + math.log(2.0) * b) / PHI + bridge(rng, PHI, reviewers)[rev]
    y = rng.random(len(rev)) < expit(eta)
    return pd.DataFrame(
        {
            "case_id": [f"c{i}" for i in range(len(rev))],
            "group": np.where(b, "B", "A"),
            "reviewer": [f"r{r}" for r in rev],
            "margin": margin,
            "model_decision": "favourable",
            "final_decision": np.where(y, "unfavourable", "favourable"),
            "action": np.where(y, "override-unfavourable", "uphold"),
        }
    )


def test_bridge_intercepts_leave_the_marginal_model_logistic() -> None:
    # The known truth of the next test: E_u[expit(η/φ + u)] = expit(η) (numerical check).
    u = bridge(np.random.default_rng(0), PHI, 400_000)
    for eta in (-2.0, -0.5, 0.0, 1.2):
        assert np.mean(expit(eta / PHI + u)) == pytest.approx(expit(eta), abs=0.002)


@pytest.mark.slow
def test_reviewer_effect_of_odds_ratio_two_recovered_under_clustering() -> None:
    # 40 reviewers who differ in how often they override and in how many group-B cases they
    # see. The cluster-robust interval covers the true odds ratio 2 in about 95 % of ledgers;
    # the model-based interval, which treats reviews as independent, covers it less often.
    reps = 200
    cover = cover_model = 0
    logs = []
    for seed in range(reps):
        fit = conditional_disparity(clustered_ledger(seed), "to_unfavourable", reference_group="A")
        row = next(r for r in fit.rows if r.group == "B")
        assert fit.standard_errors.startswith("cluster-robust by reviewer (40 reviewers")
        assert row.low is not None and row.high is not None and row.odds_ratio is not None
        assert row.model_based_low is not None and row.model_based_high is not None
        cover += row.low <= 2.0 <= row.high
        cover_model += row.model_based_low <= 2.0 <= row.model_based_high
        logs.append(math.log(row.odds_ratio))
    assert 0.91 <= cover / reps <= 0.99
    assert cover_model < cover
    assert math.exp(float(np.mean(logs))) == pytest.approx(2.0, rel=0.1)


def test_cluster_robust_errors_match_statsmodels() -> None:
    # Reference: statsmodels Logit with cov_type="cluster" (CR1 small-sample factor, its
    # default) and use_t=True (t with G − 1 degrees of freedom; Cameron & Miller 2015).
    reviews = clustered_ledger(5, reviewers=25)
    fit = conditional_disparity(reviews, "to_unfavourable", reference_group="A")
    X = np.column_stack(
        [np.ones(len(reviews)), reviews["margin"], (reviews["group"] == "B").astype(float)]
    )
    y = (reviews["final_decision"] == "unfavourable").to_numpy(dtype=float)
    ref = sm.Logit(y, X).fit(
        disp=0,
        cov_type="cluster",
        cov_kwds={"groups": pd.factorize(reviews["reviewer"])[0]},
        use_t=True,
    )
    lo, hi = np.exp(ref.conf_int()[2])
    row = next(r for r in fit.rows if r.group == "B")
    assert row.cluster_low == pytest.approx(lo, rel=1e-6)
    assert row.cluster_high == pytest.approx(hi, rel=1e-6)
    assert row.cluster_p == pytest.approx(ref.pvalues[2], rel=1e-6)
    assert (row.low, row.high) == (row.cluster_low, row.cluster_high)  # 25 ≥ 10 reviewers


def test_few_reviewers_fall_back_to_model_based_errors_and_say_so() -> None:
    fit = conditional_disparity(review_table(900, 3, bias=2.0, reviewers=4), "to_unfavourable")
    assert fit.standard_errors.startswith("model-based")
    assert any("4 reviewer(s)" in n and "too few" in n for n in fit.notes)
    row = next(r for r in fit.rows if r.group == "B")
    assert (row.low, row.high) == (row.model_based_low, row.model_based_high)
    assert row.cluster_low is not None  # still computed, shown in --json


def null_family_rates(reps: int, seed0: int) -> tuple[float, float, float, int]:
    raw = holm = bh = 0
    size = 0
    for s in range(reps):
        df = check_reviews(review_table(600, seed0 + s, bias=1.0, reviewers=5))
        fits = tuple(conditional_disparity(df, d) for d in ("to_unfavourable", "to_favourable"))
        fam = _families(
            override_rates(df, seed=s), fits, reviewer_tables(df, seed=s), None, None, None, None
        )[0]
        raw += fam.raw_below_alpha > 0
        holm += fam.flagged > 0
        bh += fam.flagged_bh > 0
        size = len(fam.tests)
    return raw / reps, holm / reps, bh / reps, size


@pytest.mark.slow
def test_null_ledger_is_flagged_at_about_the_nominal_rate_after_correction() -> None:
    # No group effect anywhere: of the report's 10 review tests (3 override tables, 2 odds
    # ratios, 5 reviewers) some p falls below 0.05 in a large share of ledgers; after Holm's
    # correction the family-wise rate is at or below about 5 % (Holm 1979; Fisher's exact
    # tests are conservative, so below is expected), and Benjamini–Hochberg's too (with no
    # true effect the FDR equals the FWER).
    raw, holm, bh, size = null_family_rates(100, 7000)
    assert size == 10
    assert raw >= 0.15
    assert holm <= 0.09
    assert bh <= 0.09


def test_reviewer_tables_count_by_hand() -> None:
    # Reference: pandas crosstab per reviewer and scipy's fisher_exact on each 2×2 table.
    reviews = review_table(700, 21, bias=2.0, reviewers=4)
    tables = {t.reviewer: t for t in reviewer_tables(reviews)}
    d = reviews[reviews["final_decision"].notna()]
    over = d["final_decision"] != d["model_decision"]
    for name, sub in d.groupby("reviewer"):
        t = tables[str(name)]
        o = over[sub.index]
        counts = pd.crosstab(sub["group"], o).reindex(index=["A", "B"], columns=[True, False])
        rows = {r.group: r for r in t.rows}
        for g in ("A", "B"):
            assert (rows[g].overridden, rows[g].upheld) == tuple(counts.loc[g].fillna(0))
        p = stats.fisher_exact(counts.fillna(0).to_numpy()).pvalue
        assert t.test.p_value == pytest.approx(p)
        assert t.deferred == int(
            reviews.loc[reviews["reviewer"] == name, "final_decision"].isna().sum()
        )
