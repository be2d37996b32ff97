"""The deployed card's own reasons for a case (closecall.analysis.deployed_card, explain).

Outside references: the points-to-double-odds scaling (common practice in credit scoring;
Siddiqi, Credit Risk Scorecards, 2006 — from memory); the demo card's points recomputed with
plain pandas; NumPy's quantile with method="inverted_cdf" (Hyndman & Fan 1996, definition 1)
for the proxies carried into another group.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from closecall.analysis.deployed_card import card_counterparts, card_dependence
from closecall.analysis.explain import explain_case
from closecall.setup.demo import write_demo
from closecall.suite.opening import OpenedStudy, open_study
from scorecard_helpers import card_study, demo_points, demo_points_by_feature, without_card

FACTOR = 20 / math.log(2)  # PDO 20 (common practice: factor = PDO / ln 2)


@pytest.fixture(scope="module")
def study(tmp_path_factory: pytest.TempPathFactory) -> OpenedStudy:
    return open_study(card_study(tmp_path_factory.mktemp("card-explain")))


@pytest.fixture(scope="module")
def frames(study: OpenedStudy) -> tuple[pd.DataFrame, pd.DataFrame]:
    assert study.config.data.pending is not None
    return pd.read_csv(study.config.data.history), pd.read_csv(study.config.data.pending)


def _briar_case(frames: tuple[pd.DataFrame, pd.DataFrame]) -> str:
    pending = frames[1]
    return str(pending.loc[pending["heritage"] == "Briar", "application_id"].iloc[0])


def test_card_reasons_add_up_to_its_margin(
    study: OpenedStudy, frames: tuple[pd.DataFrame, pd.DataFrame]
) -> None:
    history, pending = frames
    case = _briar_case(frames)
    c = explain_case(study, case)["deployed_card"]
    points = float(demo_points(pending[pending["application_id"] == case])[0])
    assert c["points"] == points
    assert c["margin_points"] == points - 500
    # margin in log-odds = (points − cut-off) / (PDO / ln 2)
    assert c["margin"] == pytest.approx((points - 500) / FACTOR, abs=1e-12)
    # each feature's points on the case against the history's average points of the feature,
    # recomputed with pandas from the card's rows; the baseline is the average case's margin
    by_feature = demo_points_by_feature(pending[pending["application_id"] == case]).iloc[0]
    mean = demo_points_by_feature(history).mean()
    plain = by_feature - mean
    got = {r["feature"]: r["contribution_points"] for r in c["contributions"]}
    assert got == pytest.approx(plain.to_dict(), abs=1e-9)
    got_lo = {r["feature"]: r["contribution"] for r in c["contributions"]}
    assert got_lo == pytest.approx((plain / FACTOR).to_dict(), abs=1e-12)
    assert c["baseline_points"] == pytest.approx(474 + mean.sum() - 500, abs=1e-9)
    assert c["baseline"] == pytest.approx((474 + mean.sum() - 500) / FACTOR, abs=1e-12)
    # the group part of a Briar case: −18 points minus the history's average heritage points
    briar_share = float((history["heritage"] == "Briar").mean())
    group_part = -18 - (-18 * briar_share)
    assert c["group_part_points"] == pytest.approx(group_part, abs=1e-9)
    assert c["group_part"] == pytest.approx(group_part / FACTOR, abs=1e-12)
    assert c["margin_group_neutral_points"] == pytest.approx(points - 500 - group_part, abs=1e-9)
    assert c["rests_on_group"] == ((points >= 500) != (points - 500 - group_part >= 0))
    roles = {r["feature"]: r["role"] for r in c["contributions"]}
    assert roles["heritage"] == "group"
    assert roles["depot_distance_km"] == "proxy"  # flagged by the study's proxy detection
    # the counterpart in Aster: the Briar weight of −18 points taken off
    (aster,) = c["counterparts"]
    assert aster["group"] == "Aster"
    assert aster["margin_group_swapped"] == pytest.approx(points - 500 + 18)


def test_proxies_are_carried_by_the_inverse_distribution(
    study: OpenedStudy, frames: tuple[pd.DataFrame, pd.DataFrame]
) -> None:
    snap = study.snapshot
    rows = np.arange(snap.n_cases)
    dep = card_dependence(snap, rows)
    assert dep is not None
    levels, swapped, carried = card_counterparts(snap, dep)
    assert carried is not None
    hist = np.asarray(snap.arrays["card__hist_points"])
    hist_codes = np.asarray(snap.hist_group_codes)
    codes = np.asarray(snap.group_codes)
    proxies = [j for j, r in enumerate(dep.roles) if r == "proxy"]
    assert [dep.features[j] for j in proxies] == ["depot_distance_km"]
    j = proxies[0]
    for g in range(len(levels)):
        h = 1 - g
        sel = codes == g
        own = dep.points[sel, j]
        ref = hist[hist_codes == g, j]
        # mid-rank F_g, then NumPy's inverted_cdf quantile of group h (Hyndman & Fan def. 1)
        F = ((ref[None, :] < own[:, None]).sum(1) + (ref[None, :] <= own[:, None]).sum(1)) / (
            2 * len(ref)
        )
        moved = np.quantile(hist[hist_codes == h, j], F, method="inverted_cdf")
        np.testing.assert_allclose(carried[sel, h], swapped[sel, h] + moved - own, atol=1e-9)


def test_explain_without_a_card_has_none(tmp_path: Path) -> None:
    opened = open_study(without_card(write_demo(tmp_path, cases=600, seed=2)))
    assert "deployed" not in opened.snapshot.model_names
    case = str(opened.snapshot.case_ids[0])
    assert explain_case(opened, case)["deployed_card"] is None


def test_cli_explain_shows_the_card(  # type: ignore[no-untyped-def]
    study: OpenedStudy, frames: tuple[pd.DataFrame, pd.DataFrame], cli
) -> None:
    case = _briar_case(frames)
    res = cli("explain", case, "--json", "--config", str(study.config.path))
    assert res.code == 0, res.err
    data = json.loads(res.out)
    card = data.get("details", data)["deployed_card"]
    assert card["card"] == "scorecard.csv" and card["contributions"]
    res = cli("explain", case, "--config", str(study.config.path))
    assert res.code == 0, res.err
    assert "deployed scorecard's own reasons (scorecard.csv)" in res.out
    assert "heritage" in res.out and "GROUP" in res.out


def test_card_only_in_pending_says_what_cannot_be_computed(tmp_path: Path) -> None:
    from closecall.setup.demo import DEMO_SCORECARD

    text = DEMO_SCORECARD + "deployed_score,,,0.5,-5\ndeployed_score,,0.5,,5\n"
    opened = open_study(card_study(tmp_path, text))
    case = str(opened.snapshot.case_ids[0])
    c = explain_case(opened, case)["deployed_card"]
    assert c["baseline_source"] == "cases under review"
    assert any("held-out metrics" in t for t in c["cannot"])
    assert all(cp["margin_carried"] is None for cp in c["counterparts"])
    assert c["similar_cases"] == []
