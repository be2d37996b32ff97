"""Logistic regression fits, their Hessians and per-case quadratic forms.

The fit itself is scikit-learn's ``LogisticRegression`` (Newton–Cholesky solver). The penalty is
written ``lambda``: the fit minimises  sum_i loss_i + lambda/2 * |w|^2  (intercept unpenalised),
which is scikit-learn's objective with ``C = 1/lambda``; ``lambda = 0`` is the unpenalised
maximum-likelihood fit that statsmodels' ``Logit`` also computes.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from scipy.linalg import cho_factor, solve_triangular
from scipy.special import expit, log_expit
from sklearn.exceptions import ConvergenceWarning
from sklearn.linear_model import LogisticRegression


@dataclass
class LogitFit:
    """One fitted logistic model in the full design space (zeros outside its columns)."""

    intercept: float
    coef: np.ndarray  # (p,)
    objective: float  # penalised total negative log-likelihood at the optimum
    n: int

    def logit(self, X: np.ndarray) -> np.ndarray:
        return self.intercept + X @ self.coef


def negative_log_likelihood(eta: np.ndarray, y: np.ndarray) -> float:
    """Total Bernoulli negative log-likelihood for log-odds eta and 0/1 labels y."""
    return float(-(y * log_expit(eta) + (1 - y) * log_expit(-eta)).sum())


def fit_logit(
    X: np.ndarray,
    y: np.ndarray,
    mask: np.ndarray,
    penalty: float,
    warm: LogitFit | None = None,
) -> LogitFit:
    """Fit a logistic regression on the columns in ``mask``.

    Parameters
    ----------
    X : (n, p) design matrix
    y : (n,) 0/1 labels, 1 = favourable
    mask : (p,) boolean, the columns this model may use
    penalty : lambda >= 0 (0 = unpenalised)
    warm : a previous fit to start from (used when cross-fitting)
    """
    cols = np.flatnonzero(mask)
    Xa = X[:, cols]
    clf = LogisticRegression(
        C=np.inf if penalty == 0 else 1.0 / penalty,
        solver="newton-cholesky",
        tol=1e-10,
        max_iter=200,
        warm_start=warm is not None,
    )
    if warm is not None:
        clf.coef_ = warm.coef[cols][None, :].copy()
        clf.intercept_ = np.array([warm.intercept])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        warnings.simplefilter("ignore", RuntimeWarning)
        warnings.simplefilter("ignore", UserWarning)
        clf.fit(Xa, y)
    coef = np.zeros(X.shape[1])
    coef[cols] = clf.coef_[0]
    intercept = float(clf.intercept_[0])
    eta = intercept + Xa @ clf.coef_[0]
    obj = negative_log_likelihood(eta, y) + 0.5 * penalty * float(coef @ coef)
    return LogitFit(intercept, coef, obj, len(y))


def hessian(X: np.ndarray, mask: np.ndarray, fit: LogitFit, penalty: float) -> np.ndarray:
    """Hessian of the penalised negative log-likelihood over [intercept, active columns]."""
    cols = np.flatnonzero(mask)
    Xa = X[:, cols]
    p = expit(fit.intercept + Xa @ fit.coef[cols])
    w = p * (1 - p)
    k = len(cols) + 1
    H = np.empty((k, k))
    H[0, 0] = w.sum()
    H[0, 1:] = H[1:, 0] = w @ Xa
    H[1:, 1:] = (Xa * w[:, None]).T @ Xa
    H[1:, 1:] += penalty * np.eye(k - 1)
    return H


def cholesky_lower(H: np.ndarray) -> np.ndarray:
    """Lower Cholesky factor of H, with a tiny ridge if H is numerically singular."""
    try:
        c, _ = cho_factor(H, lower=True)
    except np.linalg.LinAlgError:
        ridge = 1e-8 * max(float(np.trace(H)) / len(H), 1.0)
        c, _ = cho_factor(H + ridge * np.eye(len(H)), lower=True)
    return np.tril(c)


def quadratic_form(X: np.ndarray, mask: np.ndarray, chol: np.ndarray) -> np.ndarray:
    """x̃ᵀ H⁻¹ x̃ for every row, x̃ = [1, x_active], via one triangular solve (no inverse)."""
    cols = np.flatnonzero(mask)
    Xt = np.empty((len(cols) + 1, X.shape[0]))
    Xt[0] = 1.0
    Xt[1:] = X[:, cols].T
    Z = solve_triangular(chol, Xt, lower=True, check_finite=False)
    return np.einsum("ij,ij->j", Z, Z)
