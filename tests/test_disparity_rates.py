"""Favourable rates, the adverse impact ratio and the four-fifths rule."""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.stats.proportion import proportion_confint

from closecall.reports.disparity.intervals import (
    bootstrap_cells,
    percentile_interval,
    wilson_interval,
)
from closecall.reports.disparity.rates import (
    adverse_impact_ratios,
    favourable_rates,
    four_fifths_flag,
)
from disparity_sim import table_from_counts


def test_four_fifths_worked_example() -> None:
    # Selection rates 60 % and 30 %: ratio 0.30 / 0.60 = 0.5 < 0.8, so adverse impact is
    # indicated. Rule: 29 CFR 1607.4(D); the numbers are a common illustration (from memory).
    ratios = adverse_impact_ratios({"A": 0.60, "B": 0.30})
    assert ratios["A"] == pytest.approx(1.0)
    assert ratios["B"] == pytest.approx(0.5)
    assert four_fifths_flag(ratios["B"])
    assert not four_fifths_flag(ratios["A"])


def test_four_fifths_boundary() -> None:
    # 29 CFR 1607.4(D): "less than four-fifths (4/5) (or eighty percent)" -> exactly 0.8 is not
    # flagged, just below is.
    assert not four_fifths_flag(0.8)
    assert four_fifths_flag(0.7999)


def test_worked_example_through_the_review_table() -> None:
    # Same worked example as decided reviews: A 60 of 100 favourable after review, B 30 of 100.
    # The model said A 50 %, B 40 %: ratio 0.8 (not flagged); review moved it to 0.5 (flagged).
    reviews = table_from_counts({"A": (50, 0, 10, 40), "B": (30, 10, 0, 60)})
    res = favourable_rates(reviews, n_boot=500, seed=1)
    rows = {r.group: r for r in res.rows}
    assert rows["A"].model_rate == pytest.approx(0.5)
    assert rows["A"].final_rate == pytest.approx(0.6)
    assert rows["B"].final_rate == pytest.approx(0.3)
    assert rows["B"].model_air == pytest.approx(0.8)
    assert not rows["B"].model_flag
    assert rows["B"].final_air == pytest.approx(0.5)
    assert rows["B"].final_flag
    assert res.final_reference == "A"
    assert rows["B"].change == pytest.approx(-0.1)
    assert res.lowest_air_change == pytest.approx(-0.3)
    # intervals bracket the point values
    b = rows["B"]
    assert b.final_air_low < 0.5 < b.final_air_high
    assert b.change_low < -0.1 < b.change_high
    assert res.lowest_air_change_low < -0.3 < res.lowest_air_change_high


@pytest.mark.parametrize(("k", "n"), [(0, 10), (3, 10), (10, 10), (17, 40), (250, 1000)])
def test_wilson_matches_statsmodels(k: int, n: int) -> None:
    # Reference: statsmodels.stats.proportion.proportion_confint(method="wilson").
    lo, hi = wilson_interval(k, n, 0.95)
    ref_lo, ref_hi = proportion_confint(k, n, alpha=0.05, method="wilson")
    assert float(lo) == pytest.approx(ref_lo, abs=1e-12)
    assert float(hi) == pytest.approx(ref_hi, abs=1e-12)


def test_wilson_empty_is_nan() -> None:
    lo, hi = wilson_interval(np.array([0, 1]), np.array([0, 2]))
    assert np.isnan(lo[0]) and np.isnan(hi[0])
    assert np.isfinite(lo[1])


def test_multinomial_bootstrap_keeps_group_sizes_and_mean() -> None:
    cells = np.array([[30, 10, 5, 55], [5, 5, 0, 0]])
    draws = bootstrap_cells(cells, 4000, np.random.default_rng(3))
    assert draws.shape == (4000, 2, 4)
    assert np.all(draws.sum(axis=2) == cells.sum(axis=1))
    assert draws[:, 0, :].mean(axis=0) == pytest.approx(cells[0], rel=0.05)
    assert np.all(draws[:, 1, 2] == 0)  # an empty cell stays empty, as in a case bootstrap


@pytest.mark.slow
def test_change_interval_covers_truth_at_nominal_rate() -> None:
    # Paired model/final decisions with P(model favourable) = 0.5, P(to unfavourable) = 0.2,
    # P(to favourable) = 0.1: the true change in the favourable rate is 0.5·0.1 − 0.5·0.2 =
    # −0.05. A 95 % percentile bootstrap should cover it in about 95 % of samples.
    rng = np.random.default_rng(11)
    hits, reps, n = 0, 200, 300
    for _ in range(reps):
        p = np.array([0.5 * 0.8, 0.5 * 0.2, 0.5 * 0.1, 0.5 * 0.9])
        a = rng.multinomial(n, p)
        b = rng.multinomial(n, p)
        reviews = table_from_counts({"A": tuple(a), "B": tuple(b)})  # type: ignore[dict-item]
        res = favourable_rates(reviews, n_boot=400, seed=int(rng.integers(1 << 30)))
        r = res.rows[0]
        hits += r.change_low <= -0.05 <= r.change_high
    assert 0.89 <= hits / reps <= 0.99


def test_bootstrap_is_seeded() -> None:
    reviews = table_from_counts({"A": (40, 5, 5, 50), "B": (20, 10, 2, 60)})
    a = favourable_rates(reviews, n_boot=300, seed=5)
    b = favourable_rates(reviews, n_boot=300, seed=5)
    c = favourable_rates(reviews, n_boot=300, seed=6)
    assert a == b
    assert a.rows[1].final_air_low != c.rows[1].final_air_low


def test_percentile_interval_ignores_nan_columns() -> None:
    draws = np.array([[1.0, np.nan], [2.0, np.nan], [3.0, np.nan]])
    lo, hi = percentile_interval(draws, 0.5)
    assert lo[0] == pytest.approx(1.5) and hi[0] == pytest.approx(2.5)
    assert np.isnan(lo[1]) and np.isnan(hi[1])


def test_no_favourable_decisions_gives_undefined_ratios_with_a_note() -> None:
    reviews = table_from_counts({"A": (0, 0, 0, 20), "B": (0, 0, 0, 10)})
    res = favourable_rates(reviews, n_boot=200)
    assert all(np.isnan(r.model_air) for r in res.rows)
    assert any("undefined" in n for n in res.notes)
