"""The study's scorecard as the suite's deployed model: scores, held-out metrics per group,
recalibration, what cannot be computed.

Outside references: the points-to-double-odds scaling (common practice in credit scoring;
Siddiqi, Credit Risk Scorecards, 2006 — from memory), scikit-learn's roc_auc_score and
log_loss, statsmodels' Logit; the demo card's points are recomputed with plain pandas.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.special import expit
from sklearn.metrics import log_loss, roc_auc_score

from closecall.setup.demo import DEMO_SCORECARD
from closecall.suite.opening import OpenedStudy, open_study
from closecall.suite.scorecard_study import card_meta, deployed_card
from scorecard_helpers import card_study, demo_points


@pytest.fixture(scope="module")
def study(tmp_path_factory: pytest.TempPathFactory) -> OpenedStudy:
    return open_study(card_study(tmp_path_factory.mktemp("card")))


def test_deployed_model_is_the_card_on_its_own_scale(study: OpenedStudy) -> None:
    card = deployed_card(study)
    assert card is not None and card.scaling == "card"
    # factor = PDO / ln 2 and offset = anchor_points − factor·ln(anchor_odds) (common practice)
    assert card.factor == pytest.approx(20 / math.log(2))
    assert card.offset == pytest.approx(500.0)
    pending = pd.read_csv(study.config.data.pending)  # type: ignore[arg-type]
    rows = study.snapshot.rows_of(pending["application_id"].to_numpy())
    points = demo_points(pending)
    # ln(odds) = (points − 500) · ln 2 / 20: the odds double every 20 points, 1:1 at 500
    np.testing.assert_allclose(
        np.asarray(study.snapshot.logit("deployed"))[rows],
        (points - 500) * math.log(2) / 20,
        atol=1e-12,
    )
    stored = np.asarray(study.snapshot.arrays["card__points"])[rows]
    np.testing.assert_array_equal(stored.sum(axis=1) + 474, points)


def test_deployed_held_out_metrics_per_group(study: OpenedStudy) -> None:
    history = pd.read_csv(study.config.data.history)
    y = (history["completed"] == "yes").to_numpy().astype(int)
    p = expit((demo_points(history) - 500) * math.log(2) / 20)
    rows = {r["group"]: r for r in study.snapshot.metrics if r["model"] == "deployed"}
    assert set(rows) == {"Aster", "Briar", "all"}
    for group in ("Aster", "Briar"):
        sel = (history["heritage"] == group).to_numpy()
        # scikit-learn's roc_auc_score and log_loss on the card's own probabilities
        assert rows[group]["auc"] == pytest.approx(roc_auc_score(y[sel], p[sel]), abs=1e-12)
        assert rows[group]["log_loss"] == pytest.approx(log_loss(y[sel], p[sel]), rel=1e-9)
        assert rows[group]["cases"] == int(sel.sum())
        errors = ((p[sel] > 0.5) != (y[sel] == 1)).mean()
        assert rows[group]["error_rate[equal-costs]"] == pytest.approx(errors)


def test_card_without_scale_is_recalibrated_like_statsmodels(tmp_path: Path) -> None:
    sm = pytest.importorskip("statsmodels.api")
    text = "\n".join(
        line for line in DEMO_SCORECARD.splitlines() if "(pdo)" not in line and "anchor" not in line
    )
    opened = open_study(card_study(tmp_path, text + "\n"))
    card = deployed_card(opened)
    assert card is not None and card.scaling == "recalibrated"
    history = pd.read_csv(opened.config.data.history)
    y = (history["completed"] == "yes").to_numpy().astype(int)
    pts = demo_points(history)
    a, b = sm.Logit(y, sm.add_constant(pts)).fit(disp=0).params
    assert 1 / card.factor == pytest.approx(b, rel=1e-6)  # type: ignore[operator]
    assert card.offset == pytest.approx(-a / b, rel=1e-6)
    # held-out log-odds: each fold is scored by a recalibration on the other folds
    fold = np.asarray(opened.snapshot.arrays["fold"])
    oof = np.asarray(opened.snapshot.arrays["oof__deployed"])
    for k in (0, 3):
        train = fold != k
        a_k, b_k = sm.Logit(y[train], sm.add_constant(pts[train])).fit(disp=0).params
        np.testing.assert_allclose(oof[~train], a_k + b_k * pts[~train], rtol=1e-6)
    assert any("recalibrated" in n for n in opened.snapshot.meta["notes"])


def test_what_cannot_be_computed_is_said(tmp_path: Path) -> None:
    # the pending file's deployed_score column is not in the history: the card scores the
    # pending cases, but cannot be checked against recorded outcomes
    text = DEMO_SCORECARD + "deployed_score,,,0.5,-5\ndeployed_score,,0.5,,5\n"
    opened = open_study(card_study(tmp_path, text))
    meta = card_meta(opened.snapshot)
    assert meta is not None
    assert any("held-out metrics" in c and "deployed_score" in c for c in meta["cannot"])
    assert not [r for r in opened.snapshot.metrics if r["model"] == "deployed"]
    assert "deployed" in opened.snapshot.model_names  # its own scale still gives log-odds


def test_study_scorecard_report(study: OpenedStudy, tmp_path: Path) -> None:
    from closecall import Study
    from closecall.core.errors import UserError
    from closecall.setup.demo import write_demo
    from scorecard_helpers import without_card

    report = Study(study).scorecard().to_dict()
    assert report["kind"] == "scorecard" and report["card"]["cutoff"] == 500.0
    assert {m["group"] for m in report["metrics"]} == {"Aster", "Briar", "all"}
    assert report["cannot"] == []
    plain = open_study(without_card(write_demo(tmp_path, cases=600, seed=2)))
    with pytest.raises(UserError, match="no deployed scorecard"):
        Study(plain).scorecard()


def test_model_weights_name_the_card(study: OpenedStudy) -> None:
    from closecall.analysis.weights import model_weights

    w = model_weights(study.snapshot)
    assert w["scorecard"] == {"model": "deployed", "file": "scorecard.csv"}
    assert "deployed" not in w["imported"]
    assert "deployed" not in {m["model"] for m in w["models"]}


def test_reference_on_a_card_without_any_scale_is_refused(tmp_path: Path) -> None:
    """A card without pdo scoring a column the history lacks has no log-odds: it cannot be the
    reference model the queue ranks by."""
    from closecall.core.errors import UserError

    text = "\n".join(
        line for line in DEMO_SCORECARD.splitlines() if "(pdo)" not in line and "anchor" not in line
    )
    config = card_study(tmp_path, text + "\ndeployed_score,,,0.5,-5\ndeployed_score,,0.5,,5\n")
    config.write_text(config.read_text().replace('reference = "pooled"', 'reference = "deployed"'))
    with pytest.raises(UserError, match="no log-odds scale"):
        open_study(config)
