"""The fit checks of closecall.suite.solver (issue 10, items 3 and 4): the convergence check of warm
starts, and separation found by an overlap certificate or a linear program.

References named beside each check: scikit-learn's LogisticRegression for the optimum a warm
start must reach; scipy.optimize.linprog on every row at once (the linear program of Konis
2007, solved without constraint generation) for separation; the definitions of complete and
quasi-complete separation of Albert & Anderson (Biometrika 1984) for the constructed cases.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import linprog
from scipy.special import expit
from sklearn.linear_model import LogisticRegression

from closecall.suite import solver as lg


def _data(n: int, p: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    y = (rng.random(n) < expit(0.3 + X @ np.linspace(1.0, -1.0, p))).astype(np.float64)
    return X, y


def _lp_all_rows(X: np.ndarray, y: np.ndarray) -> float:
    """Konis's program on every row at once: max Σ a_i·beta, a_i·beta ≥ 0, |beta| ≤ 1."""
    A = np.column_stack([np.ones(len(X)), X]) * (2 * y - 1)[:, None]
    res = linprog(-A.sum(axis=0), A_ub=-A, b_ub=np.zeros(len(A)), bounds=(-1, 1), method="highs")
    assert res.status == 0
    return float(-res.fun)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_a_warm_start_that_stalls_is_refitted_cold_and_reaches_scikit_learn(seed: int) -> None:
    """A warm start far from the optimum: the Hessian there is nearly zero and the line
    search finds no better point. Before issue 10 that stall counted as convergence and the
    start came back as the fit (coefficients off by hundreds); now the check fails and the fit
    is done again from zero."""
    X, y = _data(2000, 5, 0)
    mask = np.ones(5, dtype=bool)
    far = lg.LogitFit(0.0, 1e5 * np.random.default_rng(seed).normal(size=5), 0.0, len(y))
    fit = lg.fit_logit_blocks([X], [y], mask, 1.0, far)
    # reference: scikit-learn LogisticRegression, C = 1/lambda
    ref = LogisticRegression(C=1.0, solver="newton-cholesky", tol=1e-12).fit(X, y)
    np.testing.assert_allclose(fit.coef, ref.coef_[0], atol=1e-8)
    assert fit.intercept == pytest.approx(ref.intercept_[0], abs=1e-8)
    assert fit.cold_refit and fit.converged


def test_a_good_warm_start_is_kept() -> None:
    X, y = _data(3000, 4, 2)
    mask = np.ones(4, dtype=bool)
    full = lg.fit_logit(X, y, mask, 1.0)
    fold = lg.fit_logit_blocks([X[:2400]], [y[:2400]], mask, 1.0, full)
    assert not fold.cold_refit and fold.converged


@pytest.mark.parametrize("seed", [3, 4, 5])
@pytest.mark.parametrize("lam", [0.0, 1.0, 30.0])
def test_overlap_certified_only_where_the_program_finds_no_separation(
    seed: int, lam: float
) -> None:
    """Sound data: the check finds no separation, and the program on every row agrees."""
    X, y = _data(800, 4, seed)
    X[:, 3] = (X[:, 3] > 1.2).astype(float)  # a dummy column, as the encoder makes
    mask = np.ones(4, dtype=bool)
    fit = lg.fit_logit(X, y, mask, lam)
    check = lg.check_fit([X], [y], mask, lam, fit)
    assert check.separation is None and check.problems == []
    assert _lp_all_rows(X, y) == pytest.approx(0.0, abs=1e-7)  # scipy linprog, all rows


def test_complete_separation_is_found_and_never_certified_away() -> None:
    """y = 1 exactly when x0 > 0: complete separation (Albert & Anderson 1984)."""
    X, _ = _data(500, 3, 6)
    y = (X[:, 0] > 0).astype(float)
    mask = np.ones(3, dtype=bool)
    for lam in (0.0, 1.0):
        fit = lg.fit_logit(X, y, mask, lam)
        cols = np.flatnonzero(mask)
        assert not lg._overlap_by_bound(fit, lam, cols, np.abs(X).max(axis=0))
        assert not lg._overlap_by_rows([X], [y], mask, lam, fit)
        check = lg.check_fit([X], [y], mask, lam, fit)
        assert check.separation == "complete" and check.separated_rows == 500
        assert check.separating_columns[0] == 0
    assert _lp_all_rows(X, y) > 1.0  # scipy linprog on every row: separated


def test_quasi_complete_separation_on_many_rows_matches_the_one_shot_program() -> None:
    """A rare dummy whose 40 cases are all favourable among 30,000 rows: the working set
    (2,000 rows) must grow until every row holds; the optimum equals scipy's on all rows."""
    X, y = _data(30_000, 3, 7)
    X = np.column_stack([X, np.zeros(len(X))])
    X[-40:, 3] = 1.0
    y[-40:] = 1.0
    mask = np.ones(4, dtype=bool)
    fit = lg.fit_logit(X, y, mask, 1.0)
    check = lg.check_fit([X], [y], mask, 1.0, fit)
    assert check.how == "lp" and check.separation == "quasi-complete"
    assert check.separated_rows == 40 and check.separating_columns == (3,)
    kind, _, beta = lg._separation_lp([X], [y], np.arange(4))
    assert kind == "quasi-complete"
    A = np.column_stack([np.ones(len(X)), X]) * (2 * y - 1)[:, None]
    assert float(A.sum(axis=0) @ beta) == pytest.approx(_lp_all_rows(X, y), rel=1e-6)
    assert (A @ beta >= -1e-9).all()


def test_other_degenerate_fits() -> None:
    X, y = _data(40, 60, 8)
    mask = np.ones(60, dtype=bool)
    check = lg.check_fit([X], [y], mask, 1.0, lg.fit_logit(X, y, mask, 1.0))
    assert check.more_columns_than_rows and "more_columns_than_rows" in check.problems
    ones = np.ones(40)
    small = np.zeros(60, dtype=bool)
    small[:2] = True
    check = lg.check_fit([X], [ones], small, 1.0, lg.fit_logit(X, ones, small, 1.0))
    assert check.one_outcome and check.problems == ["one_outcome"]


def test_a_steep_but_finite_fit_is_flagged_past_the_bound() -> None:
    """y ~ Bernoulli(expit(15 x)): the outcomes overlap near x = 0, so the unpenalised optimum
    is finite (statsmodels Logit finds it too), but its slope is past the ±10 bound."""
    import statsmodels.api as sm

    rng = np.random.default_rng(9)
    X = rng.normal(size=(5000, 1))
    y = (rng.random(5000) < expit(15.0 * X[:, 0])).astype(float)
    mask = np.ones(1, dtype=bool)
    fit = lg.fit_logit(X, y, mask, 0.0)
    ref = sm.Logit(y, sm.add_constant(X)).fit(disp=0, method="newton").params  # statsmodels
    assert fit.coef[0] == pytest.approx(ref[1], rel=1e-6) and ref[1] > lg.COEF_BOUND
    check = lg.check_fit([X], [y], mask, 0.0, fit)
    assert check.separation is None
    assert check.problems == ["coefficient_past_bound"] and check.large_coefs == (0,)
