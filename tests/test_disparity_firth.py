"""Firth's penalised logistic regression, against independent computations of its definition.

The published worked example of Heinze & Schemper (2002), the endometrial cancer study, is not
shipped with any package this project installs, so its numbers are not asserted here (from
memory, their NV estimate is about 2.93, not reproduced). The checks instead use:
- the known closed form for one binary covariate: Firth's log odds ratio equals the sample log
  odds ratio with 1/2 added to every cell (Haldane's correction; noted by Firth 1993 and by
  Heinze & Schemper 2002 — attribution from memory);
- an independent maximisation of the penalised log-likelihood ℓ(β) + ½ log det(XᵀWX), written
  here from the definition and solved by scipy.optimize (no code shared with the engine);
- profile intervals recomputed by constrained scipy maximisation at the reported bounds.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import optimize, stats

from closecall.reports.disparity.firth import firth_logit


def penalised(beta: np.ndarray, X: np.ndarray, y: np.ndarray) -> float:
    """ℓ(β) + ½ log det I(β), written out from Firth (1993), independently of the engine."""
    eta = X @ beta
    p = 1.0 / (1.0 + np.exp(-eta))
    ll = np.sum(y * eta - np.log1p(np.exp(eta)))
    info = X.T @ (X * (p * (1 - p))[:, None])
    return float(ll + 0.5 * np.log(np.linalg.det(info)))


def scipy_firth(X: np.ndarray, y: np.ndarray, fixed: dict[int, float] | None = None) -> np.ndarray:
    fixed = fixed or {}
    free = [j for j in range(X.shape[1]) if j not in fixed]

    def full(b: np.ndarray) -> np.ndarray:
        beta = np.zeros(X.shape[1])
        beta[free] = b
        for j, v in fixed.items():
            beta[j] = v
        return beta

    res = optimize.minimize(
        lambda b: -penalised(full(b), X, y),
        np.zeros(len(free)),
        method="BFGS",
        options={"gtol": 1e-10},
    )
    return full(res.x)


def two_by_two(a: int, n1: int, b: int, n2: int) -> tuple[np.ndarray, np.ndarray]:
    x = np.r_[np.ones(n1), np.zeros(n2)]
    y = np.r_[np.arange(n1) < a, np.arange(n2) < b].astype(float)
    return np.c_[np.ones(len(x)), x], y


@pytest.mark.parametrize(("a", "n1", "b", "n2"), [(0, 15, 9, 30), (4, 20, 11, 25), (12, 12, 3, 40)])
def test_two_by_two_equals_haldane_corrected_log_odds_ratio(
    a: int, n1: int, b: int, n2: int
) -> None:
    X, y = two_by_two(a, n1, b, n2)
    fit = firth_logit(X, y)
    haldane = np.log(((a + 0.5) / (n1 - a + 0.5)) / ((b + 0.5) / (n2 - b + 0.5)))
    assert fit.params[1] == pytest.approx(haldane, abs=1e-7)
    assert fit.params[0] == pytest.approx(np.log((b + 0.5) / (n2 - b + 0.5)), abs=1e-7)


def test_matches_an_independent_scipy_maximisation_with_separation() -> None:
    # Four columns, the binary one separated (no event when x2 = 1): maximum likelihood
    # diverges (statsmodels refuses), Firth's estimate is finite and equals the maximiser
    # of the penalised likelihood found by BFGS.
    rng = np.random.default_rng(7)
    n = 120
    x1 = rng.normal(size=n)
    x2 = (rng.random(n) < 0.25).astype(float)
    x3 = rng.normal(size=n)
    y = ((rng.random(n) < 1 / (1 + np.exp(-(0.3 + 0.8 * x1 - 0.5 * x3)))) & (x2 == 0)).astype(float)
    X = np.c_[np.ones(n), x1, x2, x3]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ml = sm.Logit(y, X).fit(disp=0, maxiter=100)
    assert not ml.mle_retvals["converged"] and ml.params[2] < -15  # diverging to -infinity
    fit = firth_logit(X, y)
    assert fit.converged and np.all(np.isfinite(fit.params))
    assert fit.params == pytest.approx(scipy_firth(X, y), abs=1e-5)
    # the separated coefficient: finite and negative, with a finite profile interval below 0
    assert -9 < fit.params[2] < -1
    assert np.isfinite(fit.low[2]) and fit.low[2] < fit.params[2] < fit.high[2] < 0


def test_profile_bounds_and_test_are_penalised_likelihood_ratios() -> None:
    # At each reported bound, 2·(ℓ*(β̂) − max ℓ* with β_j fixed there) = χ²₁(0.95), the
    # constrained maximum found independently by scipy; the p-value is the same statistic at 0.
    rng = np.random.default_rng(11)
    n = 60
    x = rng.normal(size=n)
    g = (rng.random(n) < 0.3).astype(float)
    y = (rng.random(n) < 1 / (1 + np.exp(-(-0.5 + x + 1.2 * g)))).astype(float)
    X = np.c_[np.ones(n), x, g]
    fit = firth_logit(X, y)
    top = penalised(scipy_firth(X, y), X, y)
    crit = stats.chi2.ppf(0.95, 1)
    for j in (1, 2):
        for bound in (fit.low[j], fit.high[j]):
            constrained = penalised(scipy_firth(X, y, {j: bound}), X, y)
            assert 2 * (top - constrained) == pytest.approx(crit, abs=2e-4)
        at_zero = penalised(scipy_firth(X, y, {j: 0.0}), X, y)
        assert fit.p_values[j] == pytest.approx(stats.chi2.sf(2 * (top - at_zero), 1), rel=1e-4)


def test_modified_score_is_the_gradient_of_the_penalised_likelihood() -> None:
    # Firth (1993): U*(β) = ∂/∂β [ℓ(β) + ½ log det I(β)]. Central differences of the
    # independently written penalised likelihood at an arbitrary β.
    from closecall.reports.disparity.firth import modified_score

    rng = np.random.default_rng(2)
    X = np.c_[np.ones(50), rng.normal(size=(50, 2))]
    y = (rng.random(50) < 0.4).astype(float)
    beta = np.array([0.2, -0.7, 0.4])
    score, _ = modified_score(beta, X, y)
    h = 1e-6
    numeric = [
        (penalised(beta + h * e, X, y) - penalised(beta - h * e, X, y)) / (2 * h) for e in np.eye(3)
    ]
    assert score == pytest.approx(numeric, abs=1e-6)
