"""Firth's penalised-likelihood logistic regression, for small cells and separation.

When a group has no override at all (or only overrides) in a risk set, its maximum-likelihood
odds ratio is 0 or infinite (separation) and ordinary logistic regression cannot report it.
Firth's method maximises the log-likelihood plus half the log-determinant of the Fisher
information,

    ℓ*(β) = ℓ(β) + ½ log det I(β),     I(β) = Xᵀ W X,  W = diag(π(1 − π)),

which removes the first-order bias of the maximum-likelihood estimate and always gives finite
estimates. The estimate solves the *modified score* equations

    U*_r(β) = Σ_i (y_i − π_i + h_i (½ − π_i)) x_ir = 0,

with h_i the diagonal of the hat matrix W^½ X I(β)⁻¹ Xᵀ W^½. Intervals come from the profile
penalised likelihood (Wald intervals are poor here): every β_j with
2 (ℓ*(β̂) − max_{β: β_j fixed} ℓ*(β)) ≤ χ²₁(level); the p-value is the penalised likelihood-ratio
test of β_j = 0.

References
----------
D. Firth, "Bias reduction of maximum likelihood estimates", Biometrika 80 (1993) 27-38.
G. Heinze and M. Schemper, "A solution to the problem of separation in logistic regression",
Statistics in Medicine 21 (2002) 2409-2419.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import stats
from scipy.optimize import brentq
from scipy.special import expit, log_expit

FloatArray = NDArray[np.float64]

MAX_ITER = 200
TOL = 1e-10


@dataclass(frozen=True)
class FirthFit:
    """A Firth logistic fit: estimates, profile-likelihood intervals and tests per column."""

    params: FloatArray
    se: FloatArray  # from the inverse information at the estimate (shown for reference)
    low: FloatArray  # profile penalised-likelihood interval
    high: FloatArray
    p_values: FloatArray  # penalised likelihood-ratio test of each coefficient = 0
    penalised_loglik: float
    converged: bool
    iterations: int


def penalised_loglik(beta: FloatArray, X: FloatArray, y: FloatArray) -> float:
    """ℓ(β) + ½ log det(XᵀWX): the function Firth's estimate maximises."""
    eta = X @ beta
    ll = float(np.sum(y * log_expit(eta) + (1.0 - y) * log_expit(-eta)))
    pi = expit(eta)
    info = (X * (pi * (1.0 - pi))[:, None]).T @ X
    sign, logdet = np.linalg.slogdet(info)
    if sign <= 0:
        return -np.inf
    return ll + 0.5 * float(logdet)


def modified_score(beta: FloatArray, X: FloatArray, y: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Firth's modified score U*(β) and the Fisher information I(β)."""
    pi = expit(X @ beta)
    w = pi * (1.0 - pi)
    info = (X * w[:, None]).T @ X
    # h_i = w_i x_iᵀ I⁻¹ x_i, by a Cholesky solve (no inverse)
    chol = np.linalg.cholesky(info)
    z = np.linalg.solve(chol, (X * np.sqrt(w)[:, None]).T)
    h = np.einsum("ij,ij->j", z, z)
    score = X.T @ (y - pi + h * (0.5 - pi))
    return score, info


def _fit(
    X: FloatArray, y: FloatArray, start: FloatArray, free: NDArray[np.bool_]
) -> tuple[FloatArray, float, bool, int]:
    """Newton steps on the modified score over the ``free`` coefficients (others held), with
    step halving whenever the penalised log-likelihood would fall (Heinze & Schemper 2002)."""
    beta = start.astype(float).copy()
    current = penalised_loglik(beta, X, y)
    for it in range(1, MAX_ITER + 1):
        score, info = modified_score(beta, X, y)
        s = score[free]
        step = np.linalg.solve(info[np.ix_(free, free)], s)
        size = 1.0
        while True:
            trial = beta.copy()
            trial[free] += size * step
            value = penalised_loglik(trial, X, y)
            if value >= current - 1e-12 or size < 1e-8:
                break
            size /= 2.0
        beta, gain, current = trial, value - current, value
        if np.max(np.abs(size * step)) < TOL or (abs(gain) < 1e-14 and np.max(np.abs(s)) < 1e-8):
            return beta, current, True, it
    return beta, current, False, MAX_ITER


def firth_logit(X: FloatArray, y: FloatArray, *, level: float = 0.95) -> FirthFit:
    """Fit Firth's logistic regression of 0/1 ``y`` on the columns of ``X`` (include a
    constant column yourself) with profile penalised-likelihood intervals and tests.

    Parameters
    ----------
    X
        Design matrix (n, k), full column rank.
    y
        0/1 outcomes (n,).
    level
        Confidence level of the profile intervals.
    """
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float)
    k = X.shape[1]
    every = np.ones(k, dtype=bool)
    beta, best, converged, iterations = _fit(X, y, np.zeros(k), every)
    _, info = modified_score(beta, X, y)
    se = np.sqrt(np.diag(np.linalg.inv(info)))
    crit = float(stats.chi2.ppf(level, 1))
    low = np.full(k, np.nan)
    high = np.full(k, np.nan)
    pvals = np.full(k, np.nan)
    for j in range(k):  # per coefficient (a handful), not per case
        free = every.copy()
        free[j] = False

        def profile(value: float, j: int = j, free: NDArray[np.bool_] = free) -> float:
            start = beta.copy()
            start[j] = value
            return _fit(X, y, start, free)[1]

        def gap(value: float, j: int = j, profile=profile) -> float:  # type: ignore[no-untyped-def]
            return 2.0 * (best - profile(value)) - crit

        pvals[j] = float(stats.chi2.sf(max(2.0 * (best - profile(0.0)), 0.0), 1))
        width = max(float(se[j]), 0.1)
        low[j] = _root(gap, float(beta[j]), -width)
        high[j] = _root(gap, float(beta[j]), width)
    return FirthFit(beta, se, low, high, pvals, best, converged, iterations)


def _root(gap, centre: float, step: float) -> float:  # type: ignore[no-untyped-def]
    """Where ``gap`` crosses zero going from ``centre`` in the direction of ``step``."""
    inner = centre
    outer = centre + step
    for _ in range(60):
        if gap(outer) > 0:
            return float(brentq(gap, inner, outer, xtol=1e-9))
        inner, outer = outer, outer + step
        step *= 1.6
    return float("-inf") if step < 0 else float("inf")
