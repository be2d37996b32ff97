"""The streamed Newton solver in closecall.suite.solver against scikit-learn and statsmodels.

The suite's fits read row blocks in place, start folds from the whole-history state minus the
held-out rows, and start large cold fits from a subsample; each path must land on the same
optimum the reference libraries compute.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.special import expit
from sklearn.linear_model import LogisticRegression

from closecall.suite import solver as lg


def _data(n: int, p: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    X[:, -1] = rng.random(n) < 0.3  # a dummy column, as the encoder makes
    beta = np.linspace(-1.0, 1.0, p)
    y = (rng.random(n) < expit(0.4 + X @ beta)).astype(np.float64)
    return X, y


def _sklearn(X: np.ndarray, y: np.ndarray, cols: np.ndarray, lam: float) -> np.ndarray:
    clf = LogisticRegression(C=1.0 / lam, solver="newton-cholesky", tol=1e-12, max_iter=100)
    clf.fit(X[:, cols], y)
    return np.r_[clf.intercept_, clf.coef_[0]]


@pytest.mark.parametrize("lam", [0.5, 10.0])
def test_penalised_fit_matches_scikit_learn_on_a_column_subset(lam: float) -> None:
    """scikit-learn's LogisticRegression minimises the same objective with C = 1/lambda."""
    X, y = _data(3000, 6, 1)
    mask = np.array([True, False, True, True, False, True])
    fit = lg.fit_logit(X, y, mask, lam)
    ref = _sklearn(X, y, np.flatnonzero(mask), lam)
    np.testing.assert_allclose(np.r_[fit.intercept, fit.coef[mask]], ref, atol=1e-8)
    assert np.all(fit.coef[~mask] == 0)


def test_unpenalised_fit_matches_statsmodels_and_its_hessian() -> None:
    """statsmodels' Logit (Newton) gives the same estimates; its Hessian of the log-likelihood
    is minus ours."""
    X, y = _data(2500, 4, 2)
    fit = lg.fit_logit(X, y, np.ones(4, dtype=bool), 0.0)
    model = sm.Logit(y, sm.add_constant(X))
    res = model.fit(disp=0, method="newton", tol=1e-12)
    np.testing.assert_allclose(np.r_[fit.intercept, fit.coef], res.params, atol=1e-7)
    assert fit.hessian is not None
    np.testing.assert_allclose(fit.hessian, -model.hessian(res.params), rtol=1e-7)
    np.testing.assert_allclose(lg.hessian(X, np.ones(4, dtype=bool), fit, 0.0), fit.hessian)


def test_blocks_warm_start_and_held_out_state_reach_the_same_fold_fit() -> None:
    """A fold fit from row blocks, started from the whole-history fit with the state derived
    from the held-out rows only, equals a cold fit on a copy of the training rows."""
    X, y = _data(4000, 5, 3)
    mask = np.ones(5, dtype=bool)
    full = lg.fit_logit(X, y, mask, 1.0)
    held = slice(1000, 1800)
    train = [slice(0, 1000), slice(1800, 4000)]
    state = full.state()
    assert state is not None
    start = lg.held_out_state(full, state, [X[held]], [y[held]], mask)
    fold = lg.fit_logit_blocks(
        [X[s] for s in train], [y[s] for s in train], mask, 1.0, full, start=start
    )
    keep = np.r_[0:1000, 1800:4000]
    cold = lg.fit_logit(X[keep], y[keep], mask, 1.0)
    np.testing.assert_allclose(fold.coef, cold.coef, atol=1e-8)
    assert fold.intercept == pytest.approx(cold.intercept, abs=1e-8)
    assert fold.objective == pytest.approx(cold.objective, rel=1e-12)
    assert fold.hessian is not None and cold.hessian is not None
    np.testing.assert_allclose(fold.hessian, cold.hessian, rtol=1e-6)


def test_large_cold_fit_from_a_subsample_start_matches_scikit_learn(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    """The coarse start (a fit on every s-th row) changes the path, not the optimum."""
    monkeypatch.setattr(lg, "COARSE_ROWS", 500)
    X, y = _data(6000, 5, 4)
    fit = lg.fit_logit(X, y, np.ones(5, dtype=bool), 2.0)
    np.testing.assert_allclose(
        np.r_[fit.intercept, fit.coef], _sklearn(X, y, np.arange(5), 2.0), atol=1e-8
    )


def test_collinear_columns_without_penalty_still_converge() -> None:
    """A duplicated column makes the Hessian singular; the fit still reaches the maximum
    likelihood (the fitted log-odds are unique even when the coefficients are not)."""
    X, y = _data(2000, 3, 5)
    Xd = np.column_stack([X, X[:, 0]])
    fit = lg.fit_logit(Xd, y, np.ones(4, dtype=bool), 0.0)
    ref = sm.Logit(y, sm.add_constant(X)).fit(disp=0, method="newton", tol=1e-12)
    np.testing.assert_allclose(fit.logit(Xd), ref.fittedvalues, atol=1e-6)


def test_quadratic_form_is_x_h_inverse_x() -> None:
    X, _ = _data(20000, 4, 6)
    rng = np.random.default_rng(0)
    A = rng.normal(size=(4, 4))
    H = A @ A.T + 4 * np.eye(4)  # over [intercept, columns 0, 2, 3]
    mask = np.array([True, False, True, True])
    Xt = np.column_stack([np.ones(len(X)), X[:, mask]])
    expected = np.einsum("ij,ij->i", Xt @ np.linalg.inv(H), Xt)
    np.testing.assert_allclose(lg.quadratic_form(X, mask, lg.cholesky_lower(H)), expected)
