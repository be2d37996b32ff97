"""The whole-population effect, model against final with outcomes (McNemar) and the figures by
period, against hand counts, statsmodels and scipy."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.contingency_tables import mcnemar
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

from closecall.core.errors import UserError
from closecall.reports.disparity.errors_by_group import error_rates
from closecall.reports.disparity.periods import by_period, period_labels
from closecall.reports.disparity.population import population_effect
from closecall.reports.disparity.report import PopulationInput, build_report
from disparity_sim import review_table


def population(seed: int, n: int = 5000):
    rng = np.random.default_rng(seed)
    codes = (rng.random(n) < 0.35).astype(np.int64)
    model = rng.random(n) < np.where(codes == 1, 0.25, 0.55)
    return codes, model, rng


def test_final_is_the_reviewers_where_decided_and_the_models_otherwise() -> None:
    # Hand count with pandas: reviewed-and-decided cases take the reviewer's decision,
    # deferred and unreviewed ones keep the model's.
    codes, model, rng = population(1)
    rows = rng.choice(len(codes), 600, replace=False)
    decided = rng.random(600) > 0.05
    final_fav = np.where(rng.random(600) < 0.2, ~model[rows], model[rows])
    eff = population_effect(codes, ["A", "B"], model, rows, decided, final_fav, n_boot=200)
    final = pd.Series(model.copy())
    final.iloc[rows[decided]] = final_fav[decided]
    frame = pd.DataFrame({"g": codes, "m": model, "f": final})
    by = frame.groupby("g").agg(n=("m", "size"), m=("m", "sum"), f=("f", "sum"))
    for code, row in zip((0, 1), eff.rows, strict=True):
        assert (row.cases, row.model_favourable, row.final_favourable) == tuple(by.loc[code])
        lo, hi = proportion_confint(by.loc[code, "f"], by.loc[code, "n"], method="wilson")
        assert (row.final_low, row.final_high) == pytest.approx((lo, hi))
    assert eff.decided == int(decided.sum()) and eff.reviewed == 600


def test_adverse_impact_ratio_intervals_are_katz_against_statsmodels() -> None:
    # Reference: statsmodels confint_proportions_2indep(compare="ratio", method="log").
    codes, model, _ = population(2)
    eff = population_effect(
        codes, ["A", "B"], model, np.arange(0), np.zeros(0, bool), np.zeros(0, bool), n_boot=200
    )
    a, b = eff.rows
    assert eff.model_reference == "A" and a.model_air_method == "reference"
    ref = confint_proportions_2indep(
        b.model_favourable, b.cases, a.model_favourable, a.cases, method="log", compare="ratio"
    )
    assert b.model_air_method == "katz-log"
    assert (b.model_air_low, b.model_air_high) == pytest.approx(ref)
    assert b.model_flag == (b.model_air < 0.8)
    # nothing reviewed: final = model, no change
    assert b.final_air == b.model_air and b.change == 0 and eff.lowest_air_change == 0


def test_a_group_with_no_favourable_case_gets_koopman_interval() -> None:
    # Reference: statsmodels' score interval without the N/(N−1) factor (Koopman 1984).
    codes = np.repeat([0, 1], [200, 80])
    model = np.r_[np.arange(200) < 90, np.zeros(80, bool)]
    eff = population_effect(
        codes, ["A", "B"], model, np.arange(0), np.zeros(0, bool), np.zeros(0, bool), n_boot=200
    )
    b = eff.rows[1]
    assert b.model_air == 0 and b.model_air_method == "koopman-score" and b.model_air_low == 0
    ref = confint_proportions_2indep(
        0, 80, 90, 200, method="score", compare="ratio", correction=False
    )
    assert b.model_air_high == pytest.approx(ref[1], rel=1e-6)


def test_report_matches_reviews_to_cases_by_id() -> None:
    reviews = review_table(300, 3)
    ids = np.array([f"C-{i:05d}" for i in range(2000)])
    rng = np.random.default_rng(0)
    codes = (rng.random(2000) < 0.4).astype(np.int64)
    codes[:300] = (reviews["group"] == "B").to_numpy()
    model = np.r_[(reviews["model_decision"] == "favourable").to_numpy(), rng.random(1700) < 0.5]
    rep = build_report(
        reviews, n_boot=200, population=PopulationInput(ids, codes, ["A", "B"], model)
    )
    assert rep.population is not None
    assert rep.population.reviewed == 300
    overridden = (reviews["final_decision"].notna()) & (
        reviews["final_decision"] != reviews["model_decision"]
    )
    changed = sum(r.changed_to_favourable + r.changed_to_unfavourable for r in rep.population.rows)
    assert changed == int(overridden.sum())


def test_mcnemar_matches_statsmodels_exact() -> None:
    # Reference: statsmodels.stats.contingency_tables.mcnemar(exact=True) on the table of
    # model right/wrong × final right/wrong.
    reviews = review_table(600, 8, bias=2.0)
    rng = np.random.default_rng(8)
    reviews["outcome"] = np.where(rng.random(600) < 0.5, "favourable", "unfavourable")
    res = error_rates(reviews)
    d = reviews[reviews["final_decision"].notna()]
    right_m = (d["model_decision"] == d["outcome"]).to_numpy()
    right_f = (d["final_decision"] == d["outcome"]).to_numpy()
    table = [
        [(right_m & right_f).sum(), (right_m & ~right_f).sum()],
        [(~right_m & right_f).sum(), (~right_m & ~right_f).sum()],
    ]
    assert res.mcnemar_all is not None
    assert res.mcnemar_all.p_value == pytest.approx(mcnemar(table, exact=True).pvalue)
    for row in res.rows:
        s = (d["group"] == row.group).to_numpy()
        t = [
            [(right_m & right_f & s).sum(), (right_m & ~right_f & s).sum()],
            [(~right_m & right_f & s).sum(), (~right_m & ~right_f & s).sum()],
        ]
        assert row.mcnemar.p_value == pytest.approx(mcnemar(t, exact=True).pvalue)
        assert (row.mcnemar.model_only, row.mcnemar.final_only) == (t[0][1], t[1][0])


def test_outcome_gaps_against_the_reference_group() -> None:
    # Reference: statsmodels newcomb difference of false-favourable rates, B against A.
    reviews = review_table(800, 9)
    rng = np.random.default_rng(9)
    reviews["outcome"] = np.where(rng.random(800) < 0.5, "favourable", "unfavourable")
    res = error_rates(reviews)
    assert res.reference_group == "A"
    a = next(r for r in res.rows if r.group == "A")
    b = next(r for r in res.rows if r.group == "B")
    assert a.model_ff_gap is None and b.model_ff_gap is not None
    x, y = b.model_false_favourable, a.model_false_favourable
    ref = confint_proportions_2indep(x.errors, x.cases, y.errors, y.cases, method="newcomb")
    assert (b.model_ff_gap.difference_low, b.model_ff_gap.difference_high) == pytest.approx(ref)


def test_periods_by_month_and_quarter_count_by_hand() -> None:
    reviews = review_table(500, 10)
    rng = np.random.default_rng(10)
    day = pd.Timestamp("2026-01-01", tz="UTC") + pd.to_timedelta(rng.integers(0, 200, 500), "D")
    reviews["time"] = day.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
    months = by_period(reviews, "month")
    quarters = by_period(reviews, "quarter")
    assert [p.period for p in quarters.periods] == ["2026Q1", "2026Q2", "2026Q3"]
    assert len(months.periods) == 7  # January to July 2026
    d = reviews[reviews["final_decision"].notna()].assign(
        m=day.strftime("%Y-%m")[reviews["final_decision"].notna().to_numpy()]
    )
    hand = d.groupby(["m", "group"]).size()
    for p in months.periods:
        for g in p.rows:
            assert g.decided == hand.get((p.period, g.group), 0)
    assert sum(p.reviews for p in months.periods) == 500
    q2 = quarters.periods[1]
    sub = reviews[day.quarter == 2]
    assert q2.reviews == len(sub)
    fav = sub[(sub["group"] == "B") & sub["final_decision"].notna()]
    b = next(g for g in q2.rows if g.group == "B")
    assert b.final_rate == pytest.approx((fav["final_decision"] == "favourable").mean())


def test_period_labels_and_bad_unit() -> None:
    t = pd.Series(["2026-12-31T23:59:59.000000Z", "2027-01-01T00:00:00.000000Z", None])
    assert period_labels(t, "month").tolist() == ["2026-12", "2027-01", None]
    assert period_labels(t, "quarter").tolist() == ["2026Q4", "2027Q1", None]
    with pytest.raises(UserError, match="week"):
        by_period(review_table(50, 1).assign(time="2026-01-01T00:00:00Z"), "week")
