"""Model comparison: the block bootstrap against the textbook standard error and scipy's
bootstrap; each group's metrics recomputed with scikit-learn and NumPy."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.special import expit, logit
from sklearn.metrics import log_loss

import closecall.analysis.comparison as cmp
from closecall.analysis.comparison import block_bootstrap_means, case_losses, compare_models
from closecall.suite.opening import OpenedStudy

#: The models compared with the pooled baseline in the demo (the deployed card has scores of
#: the history too).
MODELS = ("unaware", "proxy_free", "split", "deployed")


def test_bootstrap_of_a_mean_matches_the_standard_error() -> None:
    """The bootstrap standard error of a mean is s·sqrt((n−1)/n)/sqrt(n) (Efron & Tibshirani
    1993, §5.2); random blocks keep it when cases are independent."""
    rng = np.random.default_rng(0)
    x = rng.gamma(2.0, 1.0, size=(6000, 1))
    se = x.std() / np.sqrt(len(x))
    full = block_bootstrap_means(x, 2000, np.random.default_rng(1))
    assert full.std() == pytest.approx(se, rel=0.08)
    old = cmp.MAX_BLOCKS
    try:
        cmp.MAX_BLOCKS = 300
        blocked = block_bootstrap_means(x, 2000, np.random.default_rng(1))
    finally:
        cmp.MAX_BLOCKS = old
    assert blocked.std() == pytest.approx(se, rel=0.1)


def test_percentile_interval_matches_scipy_bootstrap() -> None:
    """Our percentile interval for a mean agrees with scipy.stats.bootstrap (percentile
    method) to Monte-Carlo precision."""
    rng = np.random.default_rng(2)
    x = rng.normal(0.3, 1.0, size=800)
    ours = block_bootstrap_means(x[:, None], 4000, np.random.default_rng(3))[:, 0]
    lo, hi = np.quantile(ours, [0.025, 0.975])
    ref = stats.bootstrap(
        (x,), np.mean, n_resamples=4000, method="percentile", rng=np.random.default_rng(4)
    ).confidence_interval
    assert lo == pytest.approx(ref.low, abs=0.015)
    assert hi == pytest.approx(ref.high, abs=0.015)


def test_case_losses() -> None:
    eta = np.array([0.0, 2.0, -1.0])
    y = np.array([1, 0, 0])
    out = case_losses(eta, y, 0.5)
    np.testing.assert_allclose(
        out["log_loss"], [np.log(2), np.log1p(np.exp(2)), np.log1p(np.exp(-1))]
    )
    np.testing.assert_array_equal(out["error"], [1.0, 1.0, 0.0])  # p = 0.5 is not > 0.5


def test_comparison_matches_scikit_learn_on_the_out_of_fold_scores(
    demo_study: OpenedStudy,
) -> None:
    """Each group's mean log-loss is scikit-learn's ``log_loss`` of the out-of-fold scores, and
    the error rate the share of cases whose decision at the lens threshold differs from the
    outcome (plain NumPy), both recomputed here from the snapshot's inputs, not from the
    suite's own metrics."""
    snap = demo_study.snapshot
    res = compare_models(snap, n_boot=300, seed=5)
    y = np.asarray(snap.hist_y)
    hg = np.asarray(snap.hist_group_codes)
    eta = {m: np.asarray(snap.arrays[f"oof__{m}"], dtype=float) for m in ("pooled", *MODELS)}
    ok = np.all([np.isfinite(e) for e in eta.values()], axis=0)
    cut = logit(snap.lenses[0].threshold)

    def plain(model: str, group: str, metric: str) -> float:
        sel = ok & (hg == snap.group_levels.index(group) if group != "all" else ok)
        if metric == "log_loss":  # Reference: sklearn.metrics.log_loss
            return float(log_loss(y[sel], expit(eta[model][sel]), labels=[0, 1]))
        return float(np.mean((eta[model][sel] > cut) != (y[sel] == 1)))

    assert {r["model"] for r in res.rows} == set(MODELS)
    for r in res.rows:
        value = plain(r["model"], r["group"], r["metric"])
        assert r["value"] == pytest.approx(value, rel=1e-9, abs=1e-12)
        base = plain("pooled", r["group"], r["metric"])
        assert r["difference"] == pytest.approx(value - base, rel=1e-9, abs=1e-12)
        assert r["low"] <= r["difference"] <= r["high"]
        expected = (
            "errs less" if r["high"] < 0 else "errs more" if r["low"] > 0 else "no clear difference"
        )
        assert r["verdict"] == expected
    again = compare_models(snap, n_boot=300, seed=5)
    assert again.rows == res.rows  # seeded: same intervals
    groups = {r["group"] for r in res.rows}
    assert groups == {*snap.group_levels, "all"}
    for t in res.tradeoffs:
        assert set(t["helps"]).isdisjoint(t["hurts"])
