"""Proxies with uncertainty: bias-corrected Cramér's V, bootstrap intervals on association and
influence, interval-based flags, the proxy-set search and the rests-on verdicts' standard
errors — each against an outside reference named beside it."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from scipy.special import expit
from scipy.stats.contingency import association
from sklearn.discriminant_analysis import LinearDiscriminantAnalysis
from sklearn.metrics import roc_auc_score

from closecall.analysis.dependence import dependence, rests_on_uncertainty
from closecall.analysis.fitted_rows import fitted_row
from closecall.suite.opening import OpenedStudy
from closecall.suite.proxies import (
    _weighted_auc_association,
    association_draws,
    bootstrap_weights,
    corrected_v_of_tables,
    cramers_v_corrected,
    influence_draws,
    proxy_sets,
)


def bergsma_by_hand(table: np.ndarray) -> float:
    """Bergsma (2013), eqs. for φ̃², r̃, c̃ and Ṽ, with φ² from scipy's (uncorrected)
    Cramér's V: φ² = V²·min(r − 1, c − 1)."""
    n = table.sum()
    r, c = table.shape
    v = association(table, method="cramer", correction=False)
    phi2 = v**2 * min(r - 1, c - 1)
    phi2t = max(0.0, phi2 - (r - 1) * (c - 1) / (n - 1))
    rt = r - (r - 1) ** 2 / (n - 1)
    ct = c - (c - 1) ** 2 / (n - 1)
    return float(np.sqrt(phi2t / min(rt - 1, ct - 1)))


@pytest.mark.parametrize(
    "table",
    [
        [[10, 20], [30, 40]],
        [[25, 5, 9], [3, 30, 12], [7, 8, 40], [2, 2, 9]],
        [[60, 1], [2, 70]],
    ],
)
def test_bias_corrected_v_matches_the_formula_on_scipys_v(table: list[list[int]]) -> None:
    t = np.asarray(table)
    a = np.repeat(np.arange(t.size) // t.shape[1], t.ravel())
    b = np.repeat(np.arange(t.size) % t.shape[1], t.ravel())
    assert cramers_v_corrected(a, b) == pytest.approx(bergsma_by_hand(t), abs=1e-12)
    assert float(corrected_v_of_tables(t)) == pytest.approx(bergsma_by_hand(t), abs=1e-12)


def test_bias_correction_removes_most_of_the_small_sample_bias() -> None:
    # Independent 8-level feature and 2-level group, 150 cases: the plain V (scipy) is far
    # from 0 on average (about sqrt((k−1)/n), Bergsma 2013 §1), the corrected one is not.
    rng = np.random.default_rng(0)
    plain, corrected = [], []
    for _ in range(300):
        a = rng.integers(0, 8, 150)
        b = rng.integers(0, 2, 150)
        t = np.zeros((8, 2), dtype=np.int64)
        np.add.at(t, (a, b), 1)
        plain.append(association(t[t.sum(1) > 0], method="cramer", correction=False))
        corrected.append(cramers_v_corrected(a, b))
    assert np.mean(plain) > 0.15
    # the truncation at 0 (φ̃² = max(0, …)) leaves a small positive mean
    assert np.mean(corrected) < 0.08
    assert np.mean(corrected) < 0.4 * np.mean(plain)


def test_weighted_auc_equals_scikit_learn_on_the_repeated_sample() -> None:
    # Integer case weights = a bootstrap sample: the weighted Mann–Whitney AUC must equal
    # scikit-learn's roc_auc_score on the cases repeated that many times (ties included).
    rng = np.random.default_rng(1)
    x = rng.integers(0, 12, 400).astype(float)  # many ties
    g = (rng.random(400) < 0.3 + 0.02 * x).astype(np.int64)
    w = rng.poisson(1.0, size=(5, 400)).astype(float)
    got = _weighted_auc_association(x, g, 2, w)
    for b in range(5):
        rep = np.repeat(np.arange(400), w[b].astype(int))
        auc = roc_auc_score(g[rep] == 0, x[rep])
        assert got[b] == pytest.approx(2 * abs(auc - 0.5), abs=1e-12)


def test_association_interval_covers_the_true_value_at_about_the_nominal_rate() -> None:
    # Known truth: x ~ N(0, 1) in one group and N(δ, 1) in the other gives AUC = Φ(δ/√2)
    # (the binormal model; Hanley & McNeil 1982), so association = 2·|Φ(δ/√2) − 0.5|.
    delta = 0.6
    truth = 2 * abs(stats.norm.cdf(delta / np.sqrt(2)) - 0.5)
    hits, reps = 0, 100
    for seed in range(reps):
        rng = np.random.default_rng(1000 + seed)
        g = (rng.random(800) < 0.35).astype(np.int64)
        x = rng.normal(size=800) + delta * g
        rows, w = bootstrap_weights(800, rng, 400)
        draws = association_draws("numeric", x, g, 2, rng, rows, w)
        lo, hi = np.quantile(draws, [0.025, 0.975])
        hits += lo <= truth <= hi
    assert 0.89 <= hits / reps <= 0.99


def test_one_step_bootstrap_of_weights_matches_the_sandwich_covariance() -> None:
    # For an unpenalised fit the one-step bootstrap's covariance estimates the robust
    # (sandwich) covariance H⁻¹JH⁻¹ (Efron & Tibshirani 1993, ch. 21): reference statsmodels
    # Logit with cov_type="HC0".
    rng = np.random.default_rng(2)
    n = 3000
    X = rng.normal(size=(n, 3))
    y = (rng.random(n) < expit(0.3 + X @ np.array([0.8, -0.5, 0.0]))).astype(float)
    ref = sm.Logit(y, sm.add_constant(X)).fit(disp=0, cov_type="HC0")
    rows, w = bootstrap_weights(n, rng, 4000)
    draws = influence_draws(X, ref.params[1:], ref.params[0], y, 0.0, np.ones(3, bool), rows, w)
    sd = draws.std(axis=0)
    assert sd == pytest.approx(np.asarray(ref.bse[1:]), rel=0.06)


def test_flags_follow_the_intervals_and_the_command_agrees(
    demo_study: OpenedStudy,
    demo_config: Path,
    cli,  # type: ignore[no-untyped-def]
) -> None:
    # The demo plants zone and depot_distance_km as proxies (docs/demo.md): both are flagged,
    # every flag has its association interval at or above the threshold and its influence
    # interval reaching it, and `closecall proxies --json` lists exactly the snapshot's flags.
    rep = demo_study.snapshot.proxies
    assert {"zone", "depot_distance_km"} <= set(rep.proxies)
    assert rep.level == 0.95 and rep.n_boot > 0
    for r in rep.rows:
        assert r.association_low is not None and r.influence_high is not None
        assert r.association_low <= r.association <= r.association_high  # type: ignore[operator]
        shown = r.association_low >= rep.association_threshold
        reaches = r.influence_high >= rep.influence_threshold
        if r.round == 1:
            assert r.proxy and shown and reaches
        if not r.proxy:
            assert not (shown and reaches)
    out = cli("proxies", "--config", str(demo_config), "--json")
    data = json.loads(out.out)
    assert data["proxies"] == rep.proxies
    assert data["proxy_sets"]["steps"][0]["removed"] in rep.proxies


def test_lda_recoverability_matches_scikit_learn() -> None:
    # Reference: scikit-learn's LinearDiscriminantAnalysis fitted on the same training folds,
    # its decision function ranked by roc_auc_score on the held-out rows; and the greedy
    # search takes out first the features that carry the group together.
    rng = np.random.default_rng(3)
    n = 3000
    g = (rng.random(n) < 0.4).astype(np.int64)
    a = rng.normal(size=n) + 0.9 * g
    b = rng.normal(size=n) + 0.7 * g
    c = rng.normal(size=n)
    X = np.column_stack([a, b, c])
    res = proxy_sets(X, g, 2, ["a", "b", "c"], ["a", "b", "c"], seed=5, folds=5)
    from sklearn.model_selection import StratifiedKFold

    scores = np.zeros(n)
    for train, test in StratifiedKFold(5, shuffle=True, random_state=5).split(X, g):
        scores[test] = (
            LinearDiscriminantAnalysis().fit(X[train], g[train]).decision_function(X[test])
        )
    assert res.start_auc == pytest.approx(roc_auc_score(g, scores), abs=1e-3)
    assert [s.removed for s in res.steps][:2] == ["a", "b"]
    assert res.steps[-1].auc_after <= 0.6


def test_rests_on_standard_errors_from_the_penalised_hessian(demo_study: OpenedStudy) -> None:
    # The group part's standard error √(dᵀ Σ_G d), Σ the inverse of the penalised Hessian
    # X̃ᵀWX̃ + λI (intercept unpenalised) written out here with numpy on the fitted row's
    # training rows; the verdict is uncertain exactly when (margin − part) ± 1.96·se straddles 0.
    snap = demo_study.snapshot
    rows = np.arange(40)
    dep = dependence(snap, "pooled", rows=rows)
    unc = rests_on_uncertainty(snap, dep)
    _, row_of_case = snap.weights("pooled")
    r = int(np.asarray(row_of_case)[0])
    fr = fitted_row(snap, "pooled", r)
    Xh = np.asarray(snap.hist_X)[fr.train][:, fr.mask]
    Xt = np.column_stack([np.ones(len(Xh)), Xh])
    p = expit(Xt @ fr.active)
    H = Xt.T @ (Xt * (p * (1 - p))[:, None])
    H[1:, 1:] += fr.penalty * np.eye(Xh.shape[1])
    cov = np.linalg.inv(H)
    mu = np.asarray(snap.hist_X).mean(axis=0)
    group_cols = np.array(
        [
            s in {f.name for f in snap.encoder.features if f.is_group}
            for s in snap.meta["column_source"]
        ]
    )[fr.mask]
    same_row = np.flatnonzero(np.asarray(row_of_case)[rows] == r)
    for i in same_row:
        d = (np.asarray(snap.X)[rows[i]] - mu)[fr.mask] * group_cols
        v = np.r_[0.0, d]
        assert unc.group_se[i] == pytest.approx(np.sqrt(v @ cov @ v), rel=1e-6)
    lo = dep.margin_group_neutral - 1.959964 * unc.group_se
    hi = dep.margin_group_neutral + 1.959964 * unc.group_se
    np.testing.assert_array_equal(unc.group_uncertain, (lo < 0) & (hi > 0))
