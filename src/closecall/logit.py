"""Logistic regression fits, their Hessians and per-case quadratic forms.

The penalty is written ``lambda``: a fit minimises  sum_i loss_i + lambda/2 * |w|^2  (intercept
unpenalised), which is scikit-learn's ``LogisticRegression`` objective with ``C = 1/lambda``;
``lambda = 0`` is the unpenalised maximum-likelihood fit that statsmodels' ``Logit`` computes.

The solver is Newton–Raphson with Cholesky solves and a backtracking (Armijo) line search, the
algorithm of scikit-learn's ``newton-cholesky`` solver and of statsmodels'
``Logit.fit(method="newton")``, with scikit-learn's stopping rule (largest gradient entry of the
mean loss and half the Newton decrement both ≤ ``tol``). It is written out here so that the
suite's many fits (whole history, every fold, every group) read the history in place: a fit
takes the training rows as a list of contiguous row blocks and the model's columns as a mask,
and streams over the rows in cache-sized chunks, so no row or column subset is ever copied and
no matrix the size of the history is allocated. The Hessian at the optimum comes with the fit.
tests/test_engine_references.py checks the fits against statsmodels and scikit-learn.

References
----------
Nocedal & Wright, "Numerical Optimization", 2nd ed., Springer 2006, §3.1 (backtracking
line search) and §3.3 (Newton's method).
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from contextlib import AbstractContextManager, nullcontext
from dataclasses import dataclass, field
from typing import TypeVar

import numpy as np
from scipy.linalg import cho_factor, cho_solve, solve_triangular
from threadpoolctl import ThreadpoolController

TOL = 1e-10
MAX_ITER = 200
CHUNK_VALUES = 1 << 18  # values of X per streamed chunk (2 MB of float64)
COARSE_ROWS = 40_000  # a cold fit on more than 4x this many rows starts from a subsample
COARSE_TOL = 1e-6
COARSE_MAX_ITER = 50
MAX_WORKERS = 4  # threads streaming the rows (numpy and BLAS release the GIL)
_EPS = 16 * float(np.finfo(np.float64).eps)


@dataclass
class LogitFit:
    """One fitted logistic model in the full design space (zeros outside its columns)."""

    intercept: float
    coef: np.ndarray  # (p,)
    objective: float  # penalised total negative log-likelihood at the optimum
    n: int
    hessian: np.ndarray | None = field(default=None, repr=False)  # over [intercept, active]
    gradient: np.ndarray | None = field(default=None, repr=False)  # the same, at the optimum

    def state(self) -> StartState | None:
        """Objective, gradient and Hessian at the optimum, when the fit kept them."""
        if self.hessian is None or self.gradient is None:
            return None
        return StartState(self.objective, self.gradient, self.hessian)

    def logit(self, X: np.ndarray) -> np.ndarray:
        return self.intercept + X @ self.coef


def negative_log_likelihood(eta: np.ndarray, y: np.ndarray) -> float:
    """Total Bernoulli negative log-likelihood for log-odds eta and 0/1 labels y."""
    # softplus(eta) - y * eta, with softplus(eta) = max(eta, 0) + log1p(exp(-|eta|))
    softplus = np.maximum(eta, 0.0) + np.log1p(np.exp(-np.abs(eta)))
    return float(softplus.sum() - np.dot(y, eta))


def _chunk_rows(p: int) -> int:
    return max(1024, CHUNK_VALUES // max(p, 1))


def _workers() -> int:
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # not Linux
        cores = os.cpu_count() or 1
    return max(1, min(cores, MAX_WORKERS))


_POOL: ThreadPoolExecutor | None = None
_BLAS: ThreadpoolController | None = None
T = TypeVar("T")
R = TypeVar("R")


def map_threads(fn: Callable[[T], R], items: Sequence[T]) -> list[R]:
    """``[fn(x) for x in items]`` on the worker threads (numpy work that releases the GIL)."""
    if _workers() <= 1 or len(items) <= 1:
        return [fn(x) for x in items]
    return list(_pool().map(fn, items))


def one_blas_thread() -> AbstractContextManager[object]:
    """While the row-streaming threads run, BLAS itself stays on one thread per call."""
    global _BLAS
    if _workers() <= 1:
        return nullcontext()
    if _BLAS is None:
        _BLAS = ThreadpoolController()
    return _BLAS.limit(limits=1, user_api="blas")


def _pool() -> ThreadPoolExecutor:
    global _POOL
    if _POOL is None:
        _POOL = ThreadPoolExecutor(max_workers=_workers(), thread_name_prefix="closecall-logit")
    return _POOL


def _sums(
    chunks: list[tuple[np.ndarray, np.ndarray]],
    theta: np.ndarray,
    want_loss: bool,
    want_hessian: bool,
) -> tuple[float, np.ndarray, np.ndarray]:
    """Loss, gradient and Hessian sums of the unpenalised loss over some chunks of rows."""
    p = len(theta) - 1
    b0, coef = float(theta[0]), theta[1:]
    loss = 0.0
    grad = np.zeros(p + 1)
    hess = np.zeros((p + 1, p + 1))
    with np.errstate(over="ignore"):
        for X, y in chunks:
            eta = X @ coef
            eta += b0
            prob = 1.0 / (1.0 + np.exp(-eta))
            if want_loss:
                # softplus(eta) = max(eta, 0) - log(max(p, 1 - p)); loss = softplus - y * eta
                loss += float(
                    (np.maximum(eta, 0.0) - np.log(0.5 + np.abs(prob - 0.5))).sum() - y @ eta
                )
            resid = prob - y
            grad[0] += resid.sum()
            grad[1:] += resid @ X
            if want_hessian:
                w = prob * (1.0 - prob)
                hess[0, 0] += w.sum()
                hess[0, 1:] += w @ X
                Z = X * np.sqrt(w)[:, None]
                hess[1:, 1:] += Z.T @ Z  # one symmetric rank-k update
    return loss, grad, hess


def _accumulate(
    blocks: Sequence[np.ndarray],
    labels: Sequence[np.ndarray],
    theta: np.ndarray,
    want_hessian: bool,
    want_loss: bool = True,
) -> tuple[float, np.ndarray, np.ndarray | None]:
    """Unpenalised loss, gradient and (optionally) Hessian over all p columns, streamed.

    ``theta`` is [intercept, coef (p)]. The rows are read in cache-sized chunks, dealt to the
    worker threads in a fixed pattern (chunk i to worker i mod w) and summed in a fixed order,
    so the result does not depend on thread timing.
    """
    step = _chunk_rows(len(theta) - 1)
    chunks = [
        (X[s : s + step], y[s : s + step])
        for X, y in zip(blocks, labels, strict=True)
        for s in range(0, len(X), step)
    ]
    w = min(_workers(), len(chunks))
    if w <= 1:
        parts = [_sums(chunks, theta, want_loss, want_hessian)]
    else:
        with one_blas_thread():
            futures = [
                _pool().submit(_sums, chunks[i::w], theta, want_loss, want_hessian)
                for i in range(w)
            ]
            parts = [f.result() for f in futures]
    loss = sum(part[0] for part in parts)
    grad = np.sum([part[1] for part in parts], axis=0)
    if not want_hessian:
        return loss, grad, None
    hess = np.sum([part[2] for part in parts], axis=0)
    hess[1:, 0] = hess[0, 1:]
    return loss, grad, hess


class _Objective:
    """The penalised objective of one model over its rows and columns."""

    def __init__(
        self,
        blocks: Sequence[np.ndarray],
        labels: Sequence[np.ndarray],
        mask: np.ndarray,
        penalty: float,
    ) -> None:
        self.blocks = blocks
        self.labels = labels
        self.penalty = penalty
        self.active = np.concatenate([[0], np.flatnonzero(mask) + 1])
        self.n = int(sum(len(b) for b in blocks))

    def __call__(
        self, theta: np.ndarray, want_hessian: bool, want_loss: bool = True
    ) -> tuple[float, np.ndarray, np.ndarray | None]:
        loss, grad, hess = _accumulate(self.blocks, self.labels, theta, want_hessian, want_loss)
        coef = theta[1:]
        loss += 0.5 * self.penalty * float(coef @ coef)
        grad[1:] += self.penalty * coef
        g = grad[self.active]
        H = None
        if hess is not None:
            H = hess[np.ix_(self.active, self.active)]
            H[1:, 1:] += self.penalty * np.eye(len(self.active) - 1)
        return loss, g, H


@dataclass
class StartState:
    """Objective, gradient and Hessian of a fit's training rows at its warm start, in the
    fit's active coordinates, when the caller can get them without a pass over the rows."""

    objective: float
    gradient: np.ndarray
    hessian: np.ndarray


def _factor(H: np.ndarray) -> tuple[np.ndarray, bool] | None:
    try:
        return cho_factor(H, lower=True)
    except np.linalg.LinAlgError:  # singular (collinear columns, no penalty)
        return None


def _direction(factor: tuple[np.ndarray, bool] | None, H: np.ndarray, g: np.ndarray) -> np.ndarray:
    if factor is None:
        return np.asarray(-np.linalg.lstsq(H, g, rcond=None)[0])
    return np.asarray(-cho_solve(factor, g))


@dataclass
class _Newton:
    """Where a Newton run stands: the point, its objective and gradient, and a Hessian."""

    theta: np.ndarray  # [intercept, coef (p)]
    f: float
    g: np.ndarray  # active coordinates
    H: np.ndarray  # active coordinates
    fresh: bool  # H is the Hessian at theta (not an older or approximate one)
    converged: bool = False


def _newton(objective: _Objective, state: _Newton, tol: float, max_iter: int) -> _Newton:
    """Newton–Raphson with a lazily refreshed Hessian.

    A step solves with the Hessian in hand and evaluates only the objective and gradient at
    the new point. The Hessian is recomputed when a step shrinks the largest gradient entry
    less than tenfold, so close to the optimum (a warm start, a coarse start) most steps skip
    the Hessian pass, and far from it the run is plain Newton.
    """
    active, n = objective.active, objective.n
    theta, f, g, H, fresh = state.theta, state.f, state.g, state.H, state.fresh
    factor = _factor(H)
    for _ in range(max_iter):
        d = _direction(factor, H, g)
        slope = float(g @ d)
        t = 1.0
        for _ in range(40):
            trial = theta.copy()
            trial[active] += t * d
            f_new, g_new, _ = objective(trial, False)
            if f_new - f <= 1e-4 * t * slope:
                break
            if abs(f_new - f) <= abs(f_new) * _EPS and np.abs(g_new).sum() < np.abs(g).sum():
                break  # at the optimum up to rounding: accept a step that shrinks the gradient
            t *= 0.5
        else:
            return _Newton(theta, f, g, H, fresh, converged=True)  # no step improves any more
        decrement = 0.5 * t * t * float(d @ H @ d) / n
        slow = np.abs(g_new).max() > 0.1 * np.abs(g).max()
        theta, f, g, fresh = trial, f_new, g_new, False
        if np.abs(g).max() / n <= tol and decrement <= tol:
            return _Newton(theta, f, g, H, fresh, converged=True)
        if slow or t < 1.0:
            _, _, H_now = objective(theta, True, want_loss=False)
            assert H_now is not None
            H, fresh, factor = H_now, True, _factor(H_now)
    return _Newton(theta, f, g, H, fresh)


def _coarse_start(
    blocks: Sequence[np.ndarray],
    labels: Sequence[np.ndarray],
    mask: np.ndarray,
    penalty: float,
    n: int,
) -> tuple[np.ndarray, np.ndarray] | None:
    """A start point and Hessian guess for a large cold fit, from a fit on every s-th row.

    The subsample's penalty is scaled by its share of the rows so that it aims at the same
    coefficients; its Hessian, scaled back up, guides the first steps on all rows. None when
    the subsample fit does not converge (e.g. separation without a penalty).
    """
    stride = max(2, n // COARSE_ROWS)
    sub_blocks = [b[::stride] for b in blocks]
    sub_labels = [y[::stride] for y in labels]
    m = int(sum(len(b) for b in sub_blocks))
    share = m / n
    objective = _Objective(sub_blocks, sub_labels, mask, penalty * share)
    theta = np.zeros(blocks[0].shape[1] + 1)
    f, g, H = objective(theta, True)
    assert H is not None
    run = _newton(objective, _Newton(theta, f, g, H, True), COARSE_TOL, COARSE_MAX_ITER)
    if not run.converged or not np.isfinite(run.theta).all():
        return None
    if not run.fresh:
        _, _, H_sub = objective(run.theta, True, want_loss=False)
        assert H_sub is not None
        run.H = H_sub
    ridge = np.zeros(len(run.H))
    ridge[1:] = penalty * share
    guess = (run.H - np.diag(ridge)) / share + np.diag(ridge / share)
    return run.theta, guess


def fit_logit_blocks(
    blocks: Sequence[np.ndarray],
    labels: Sequence[np.ndarray],
    mask: np.ndarray,
    penalty: float,
    warm: LogitFit | None = None,
    *,
    start: StartState | None = None,
    hessian_guess: np.ndarray | None = None,
    final_hessian: bool = True,
    tol: float = TOL,
    max_iter: int = MAX_ITER,
) -> LogitFit:
    """Fit a logistic regression on the rows of ``blocks`` and the columns in ``mask``.

    Parameters
    ----------
    blocks : C-contiguous (n_b, p) float64 row blocks of the design matrix (views, not copies)
    labels : (n_b,) float64 0/1 labels of each block, 1 = favourable
    mask : (p,) boolean, the columns this model may use
    penalty : lambda >= 0 (0 = unpenalised)
    warm : a previous fit to start from (used when cross-fitting); without one, a large fit
        starts from a fit on a subsample of its rows
    start : the objective, gradient and Hessian at ``warm``, when already known (saves the
        first pass over the rows)
    hessian_guess : an approximate Hessian at ``warm`` (active coordinates) to start with
        instead of computing one; it is replaced by the real one if progress is slow
    final_hessian : return the Hessian at the optimum (costs a pass if the last step kept an
        older Hessian)
    tol : stop when the largest gradient entry of the mean objective and half the Newton
        decrement per case are both at most tol
    """
    p = blocks[0].shape[1]
    objective = _Objective(blocks, labels, mask, penalty)
    active, n = objective.active, objective.n
    theta = np.zeros(p + 1)
    coarse = None
    if warm is not None:
        theta[0] = warm.intercept
        theta[active[1:]] = warm.coef[active[1:] - 1]
    elif start is None and n >= 4 * COARSE_ROWS:
        coarse = _coarse_start(blocks, labels, mask, penalty, n)
    if start is not None:
        state = _Newton(theta, start.objective, start.gradient, start.hessian, True)
    elif hessian_guess is not None:
        f, g, _ = objective(theta, False)
        state = _Newton(theta, f, g, hessian_guess, False)
    elif coarse is not None:
        theta = coarse[0]
        f, g, _ = objective(theta, False)
        state = _Newton(theta, f, g, coarse[1], False)
    else:
        f, g, H = objective(theta, True)
        assert H is not None
        state = _Newton(theta, f, g, H, True)
    run = _newton(objective, state, tol, max_iter)
    if final_hessian and not run.fresh:
        _, _, H_end = objective(run.theta, True, want_loss=False)
        assert H_end is not None
        run.H, run.fresh = H_end, True
    coef = np.zeros(p)
    coef[active[1:] - 1] = run.theta[active[1:]]
    hess = run.H if run.fresh else None
    return LogitFit(float(run.theta[0]), coef, float(run.f), n, hess, run.g)


def restricted_start(
    parent: LogitFit, parent_mask: np.ndarray, mask: np.ndarray
) -> tuple[LogitFit, np.ndarray] | None:
    """A start for a model on a subset of a fitted model's columns (same rows, same penalty).

    The parent's objective is approximated by its quadratic expansion at the parent's optimum;
    the start is that quadratic's minimum with the dropped columns held at zero, and its
    Hessian block on the kept columns is the Hessian guess. None if the parent kept no Hessian
    or ``mask`` is not within ``parent_mask``.
    """
    if parent.hessian is None or parent.gradient is None or np.any(mask & ~parent_mask):
        return None
    p_cols = np.flatnonzero(parent_mask)
    keep = np.concatenate([[0], 1 + np.flatnonzero(mask[p_cols])])  # in the parent's coords
    drop = 1 + np.flatnonzero(~mask[p_cols])
    theta = np.concatenate([[parent.intercept], parent.coef[p_cols]])
    H, g = parent.hessian, parent.gradient
    H_kk = H[np.ix_(keep, keep)]
    rhs = g[keep] - H[np.ix_(keep, drop)] @ theta[drop]
    factor = _factor(H_kk)
    step = _direction(factor, H_kk, rhs)
    new = theta[keep] + step
    coef = np.zeros(len(parent.coef))
    coef[np.flatnonzero(mask)] = new[1:]
    return LogitFit(float(new[0]), coef, parent.objective, parent.n), H_kk


def held_out_state(
    full: LogitFit,
    full_state: StartState,
    test_blocks: Sequence[np.ndarray],
    test_labels: Sequence[np.ndarray],
    mask: np.ndarray,
) -> StartState:
    """The state of a fold fit at the whole-history optimum, from the held-out rows alone.

    The training rows' loss is the whole history's minus the held-out rows'; the penalty is the
    same. So objective, gradient and Hessian on the training rows at the whole-history fit are
    the whole-history ones minus the held-out rows' sums (a pass over a K-th of the rows).
    """
    theta = np.concatenate([[full.intercept], full.coef])
    loss, grad, hess = _accumulate(test_blocks, test_labels, theta, True)
    assert hess is not None
    active = np.concatenate([[0], np.flatnonzero(mask) + 1])
    return StartState(
        full_state.objective - loss,
        full_state.gradient - grad[active],
        full_state.hessian - hess[np.ix_(active, active)],
    )


def fit_logit(
    X: np.ndarray,
    y: np.ndarray,
    mask: np.ndarray,
    penalty: float,
    warm: LogitFit | None = None,
) -> LogitFit:
    """Fit a logistic regression on the columns in ``mask`` (all rows of X).

    Parameters
    ----------
    X : (n, p) design matrix
    y : (n,) 0/1 labels, 1 = favourable
    mask : (p,) boolean, the columns this model may use
    penalty : lambda >= 0 (0 = unpenalised)
    warm : a previous fit to start from
    """
    Xc = np.ascontiguousarray(X, dtype=np.float64)
    return fit_logit_blocks([Xc], [np.asarray(y, dtype=np.float64)], mask, penalty, warm)


def hessian_blocks(
    blocks: Sequence[np.ndarray], mask: np.ndarray, fit: LogitFit, penalty: float
) -> np.ndarray:
    """Hessian of the penalised negative log-likelihood over [intercept, active columns]."""
    theta = np.concatenate([[fit.intercept], fit.coef])
    labels = [np.zeros(len(b)) for b in blocks]  # the Hessian does not depend on the labels
    _, _, H = _Objective(blocks, labels, mask, penalty)(theta, True)
    assert H is not None
    return H


def hessian(X: np.ndarray, mask: np.ndarray, fit: LogitFit, penalty: float) -> np.ndarray:
    """Hessian of the penalised negative log-likelihood over [intercept, active columns]."""
    return hessian_blocks([np.ascontiguousarray(X, dtype=np.float64)], mask, fit, penalty)


def cholesky_lower(H: np.ndarray) -> np.ndarray:
    """Lower Cholesky factor of H, with a tiny ridge if H is numerically singular."""
    try:
        c, _ = cho_factor(H, lower=True)
    except np.linalg.LinAlgError:
        ridge = 1e-8 * max(float(np.trace(H)) / len(H), 1.0)
        c, _ = cho_factor(H + ridge * np.eye(len(H)), lower=True)
    return np.tril(c)


def quadratic_form(X: np.ndarray, mask: np.ndarray, chol: np.ndarray) -> np.ndarray:
    """x̃ᵀ H⁻¹ x̃ for every row, x̃ = [1, x_active], via triangular solves (no inverse).

    Rows are taken in cache-sized chunks: each chunk's x̃ is written row-major, so its
    transpose is the column-major right-hand side the solver reads without a copy.
    """
    cols = np.flatnonzero(mask)
    n, k = X.shape[0], len(cols) + 1
    out = np.empty(n)
    step = _chunk_rows(k)
    buf = np.empty((min(step, n), k))
    for start in range(0, n, step):
        m = min(step, n - start)
        Xt = buf[:m]
        Xt[:, 0] = 1.0
        Xt[:, 1:] = X[start : start + m][:, cols]
        Z = solve_triangular(chol, Xt.T, lower=True, check_finite=False)
        out[start : start + m] = np.einsum("ij,ij->j", Z, Z)
    return out
