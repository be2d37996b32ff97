"""The assembled report: error rates with outcomes, bad input, JSON and HTML."""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from statsmodels.stats.proportion import proportion_confint

from closecall.cli.output import to_jsonable
from closecall.core.errors import UserError
from closecall.reports.disparity import build_report
from closecall.reports.disparity.errors_by_group import error_rates
from closecall.reports.disparity.html import render_html
from closecall.reports.disparity.report import PopulationInput
from disparity_sim import review_table, table_from_counts


def test_error_rates_by_group_count_by_hand() -> None:
    # A: model fav → upheld (outcome fav 30, unfav 10); model unfav → overridden fav
    # (outcome fav 5, unfav 5); B similar with other numbers.
    reviews = table_from_counts({"A": (40, 0, 10, 0), "B": (0, 20, 0, 30)})
    outcome = np.array(
        ["favourable"] * 30
        + ["unfavourable"] * 10
        + ["favourable"] * 5
        + ["unfavourable"] * 5
        + ["favourable"] * 12
        + ["unfavourable"] * 8
        + ["favourable"] * 10
        + [None] * 20,
        dtype=object,
    )
    reviews["outcome"] = outcome
    res = error_rates(reviews)
    a, b = res.rows
    # A: outcome unfavourable 15 cases; model said favourable for 10 of them; final for all 15.
    assert (a.outcome_unfavourable, a.model_false_favourable.errors) == (15, 10)
    assert a.final_false_favourable.errors == 15
    # A: outcome favourable 35; model unfavourable for 5 of them; final for none.
    assert (a.model_false_unfavourable.errors, a.final_false_unfavourable.errors) == (5, 0)
    # B: model favourable for 20 (12 fav, 8 unfav outcomes), overridden to unfav; model unfav
    # 30 (10 fav, 20 unknown outcomes), upheld.
    assert b.with_outcome == 30
    assert (b.model_false_favourable.errors, b.model_false_favourable.cases) == (8, 8)
    assert b.final_false_favourable.errors == 0
    assert (b.final_false_unfavourable.errors, b.final_false_unfavourable.cases) == (22, 22)
    assert res.without_outcome == 20
    # Wilson interval, reference statsmodels proportion_confint(method="wilson")
    lo, hi = proportion_confint(10, 15, method="wilson")
    assert a.model_false_favourable.low == pytest.approx(lo)
    assert a.model_false_favourable.high == pytest.approx(hi)


def test_empty_table_is_a_user_error() -> None:
    empty = review_table(10, 1).iloc[:0]
    with pytest.raises(UserError, match="no reviews"):
        build_report(empty)


def test_one_group_only_is_a_user_error() -> None:
    reviews = review_table(50, 1)
    reviews["group"] = "A"
    with pytest.raises(UserError, match="at least two groups"):
        build_report(reviews)


def test_only_deferrals_is_a_user_error() -> None:
    reviews = review_table(50, 1)
    reviews["action"] = "defer"
    reviews["final_decision"] = None
    with pytest.raises(UserError, match="deferrals"):
        build_report(reviews)


def test_missing_column_and_bad_values_are_named() -> None:
    reviews = review_table(30, 1)
    with pytest.raises(UserError, match="margin"):
        build_report(reviews.drop(columns=["margin"]))
    bad = reviews.copy()
    bad.loc[3, "action"] = "approve"
    with pytest.raises(UserError, match=r"row 4: action 'approve'"):
        build_report(bad)


def test_report_is_json_ready_and_seeded() -> None:
    reviews = review_table(400, 2, bias=2.0, groups=("A", "B", "C"), shares=(0.5, 0.3, 0.2))
    reviews["outcome"] = np.where(np.arange(400) % 3 == 0, "favourable", "unfavourable")
    a = build_report(reviews, seed=4, n_boot=300)
    b = build_report(reviews, seed=4, n_boot=300)
    text = json.dumps(to_jsonable(a.to_dict()))
    assert text == json.dumps(to_jsonable(b.to_dict()))
    data = json.loads(text)
    assert set(data) >= {"summary", "rates", "overrides", "conditional", "reviewers", "errors"}
    assert data["summary"]["reviews"] == 400
    assert len(data["reviewers"]) == 3
    assert a.errors is not None


def test_html_is_self_contained_and_escaped() -> None:
    reviews = review_table(300, 5, bias=2.0)
    reviews["group"] = reviews["group"].map({"A": "A", "B": "<script>alert(1)</script>"})
    html = render_html(build_report(reviews, n_boot=200))
    assert html.startswith("<!DOCTYPE html>")
    assert len(re.findall(r'src="data:image/png;base64,', html)) == 3
    assert "<script>" not in html
    assert "&lt;script&gt;" in html
    assert not re.search(r'(src|href)="(https?:)?//', html)  # nothing fetched from elsewhere


def test_summary_and_warnings_count_by_hand() -> None:
    """The summary and the warnings against pandas counts of the review table: decided and
    deferred reviews, reviewers, margins, groups largest first; a warning for the deferrals,
    for each group under SMALL_CELL decided reviews (30, common practice), and for reviewed
    cases missing from the cases under review."""
    reviews = review_table(400, 8, groups=("A", "B", "C"), shares=(0.6, 0.35, 0.05))
    decided = reviews[reviews["final_decision"].notna()]
    deferred = int((reviews["action"] == "defer").sum())
    assert deferred == len(reviews) - len(decided) > 0
    counts = decided["group"].value_counts()
    order = sorted(counts.index, key=lambda g: (-counts[g], g))
    small = [g for g in order if counts[g] < 30]
    assert small == ["C"]  # the table is built so that one group is small
    # every reviewed case but the first three, and 50 unreviewed ones, are under review
    ids = np.r_[reviews["case_id"].to_numpy()[3:], [f"U-{i}" for i in range(50)]]
    levels = ["A", "B", "C"]
    groups = np.r_[reviews["group"].to_numpy()[3:], np.array(["A", "B"] * 25)]
    population = PopulationInput(
        case_ids=ids,
        group_codes=np.array([levels.index(g) for g in groups]),
        levels=levels,
        model_favourable=np.r_[reviews["margin"].to_numpy()[3:] > 0, np.zeros(50, dtype=bool)],
    )
    rep = build_report(reviews, n_boot=200, seed=1, population=population)
    s = rep.summary
    assert (s.reviews, s.decided, s.deferred) == (400, len(decided), deferred)
    assert s.reviewers == reviews["reviewer"].nunique()
    assert (s.margin_min, s.margin_max) == (reviews["margin"].min(), reviews["margin"].max())
    assert list(s.groups) == order
    assert len(rep.warnings) == 4
    assert rep.warnings[0].startswith("the reviewed-case rates describe close calls only")
    assert f"in group(s) {', '.join(small)}:" in rep.warnings[1]
    assert rep.warnings[2].startswith(f"{deferred} deferred review(s) have no final decision")
    assert rep.warnings[3].startswith("3 reviewed case(s) are not among the cases under review")
    alone = build_report(decided, n_boot=200, seed=1)
    assert alone.warnings[0].startswith("the rates describe reviewed cases only")
    assert len(alone.warnings) == 2  # the small group; no deferral, no population
