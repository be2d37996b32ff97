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

A fit that starts anywhere but from zero (a warm start from another fit, the held-out state,
a Hessian guess) is checked when it stops: the largest gradient entry and half the Newton
decrement (the objective decrease one more Newton step would bring), each per case, must be at
most ``CHECK_TOL``; if not, the fit is done again from a cold start. ``check_fit`` then tells
whether a fit is sound: complete or quasi-complete separation (no finite unpenalised optimum),
one outcome value, more columns than rows, a coefficient past ``COEF_BOUND``, no convergence.
docs/methods.md ("Convergence and separation checks") gives the method and its sources.

References
----------
Nocedal & Wright, "Numerical Optimization", 2nd ed., Springer 2006, §3.1 (backtracking
line search) and §3.3 (Newton's method).
Boyd & Vandenberghe, "Convex Optimization", Cambridge 2004, §9.5.1 (the Newton decrement).
Albert & Anderson, "On the existence of maximum likelihood estimates in logistic regression
models", Biometrika 71 (1984) 1–10 (complete and quasi-complete separation).
Konis, "Linear programming algorithms for detecting separated data in binary logistic
regression models", DPhil thesis, University of Oxford 2007 (separation as a linear program).
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from contextlib import AbstractContextManager, nullcontext
from dataclasses import dataclass, field
from typing import Any, TypeVar

import numpy as np
from scipy.linalg import cho_factor, cho_solve, eigh, solve_triangular
from threadpoolctl import ThreadpoolController

TOL = 1e-10
MAX_ITER = 200
CHUNK_VALUES = 1 << 18  # values of X per streamed chunk (2 MB of float64)
COARSE_ROWS = 40_000  # a cold fit on more than 4x this many rows starts from a subsample
COARSE_TOL = 1e-6
COARSE_MAX_ITER = 50
MAX_WORKERS = 4  # threads streaming the rows (numpy and BLAS release the GIL)
_EPS = 16 * float(np.finfo(np.float64).eps)
CHECK_TOL = 1e-8  # a warm-started fit must end with |gradient| and decrement per case <= this
COEF_BOUND = 10.0  # |coefficient| past this, in log-odds per unit of a design column, is flagged
CERTIFICATE_MARGIN = 1e-6  # the overlap certificate must hold with this much to spare
LP_ROWS = 2000  # rows per round of the separation linear program (constraint generation)
LP_ROUNDS = 60
LP_ROW_TOL = 1e-7  # a row with a_i·beta above this is strictly separated (beta in [-1, 1])
LP_VIOLATION = 1e-9  # a row with a_i·beta below minus this violates the direction


@dataclass
class LogitFit:
    """One fitted logistic model in the full design space (zeros outside its columns)."""

    intercept: float
    coef: np.ndarray  # (p,)
    objective: float  # penalised total negative log-likelihood at the optimum
    n: int
    hessian: np.ndarray | None = field(default=None, repr=False)  # over [intercept, active]
    gradient: np.ndarray | None = field(default=None, repr=False)  # the same, at the optimum
    converged: bool = True  # the stopping rule held where the fit stopped
    cold_refit: bool = False  # a warm start failed the convergence check and was redone cold
    # the Hessian in hand when the fit stopped (maybe from an earlier point) and that point
    # ([intercept, coef]); None when it was only a guess
    curvature: np.ndarray | None = field(default=None, repr=False)
    curvature_at: np.ndarray | None = field(default=None, repr=False)

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
    H_at: np.ndarray | None = None  # the point H was computed at (None: a guess)


def _newton(objective: _Objective, state: _Newton, tol: float, max_iter: int) -> _Newton:
    """Newton–Raphson with a lazily refreshed Hessian.

    A step solves with the Hessian in hand and evaluates only the objective and gradient at
    the new point. The Hessian is recomputed when a step shrinks the largest gradient entry
    less than tenfold, so close to the optimum (a warm start, a coarse start) most steps skip
    the Hessian pass, and far from it the run is plain Newton. A run whose line search finds
    no better point counts as converged only if its gradient already meets the rule.
    """
    active, n = objective.active, objective.n
    theta, f, g, H, fresh = state.theta, state.f, state.g, state.H, state.fresh
    H_at = state.H_at
    if fresh and H_at is None:
        H_at = theta.copy()
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
        else:  # no step improves any more
            settled = bool(np.abs(g).max() / n <= tol)
            return _Newton(theta, f, g, H, fresh, converged=settled, H_at=H_at)
        decrement = 0.5 * t * t * float(d @ H @ d) / n
        slow = np.abs(g_new).max() > 0.1 * np.abs(g).max()
        theta, f, g, fresh = trial, f_new, g_new, False
        if np.abs(g).max() / n <= tol and decrement <= tol:
            return _Newton(theta, f, g, H, fresh, converged=True, H_at=H_at)
        if slow or t < 1.0:
            _, _, H_now = objective(theta, True, want_loss=False)
            assert H_now is not None
            H, fresh, factor, H_at = H_now, True, _factor(H_now), theta.copy()
    return _Newton(theta, f, g, H, fresh, H_at=H_at)


def _settled(run: _Newton, n: int) -> bool:
    """The convergence check of a fit that did not start from zero (see CHECK_TOL).

    Largest gradient entry per case, and half the Newton decrement gᵀH⁻¹g per case (the
    decrease of the objective one more Newton step would bring, with the Hessian in hand),
    both at most CHECK_TOL; and the run itself stopped by its rule.
    """
    if not run.converged or not np.isfinite(run.theta).all() or not np.isfinite(run.f):
        return False
    if np.abs(run.g).max() / n > CHECK_TOL:
        return False
    step = _direction(_factor(run.H), run.H, run.g)
    return bool(-0.5 * float(run.g @ step) / n <= CHECK_TOL)


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
    objective = _Objective(blocks, labels, mask, penalty)
    n = objective.n
    state = _first_state(objective, blocks, labels, mask, penalty, warm, start, hessian_guess)
    run = _newton(objective, state, tol, max_iter)
    cold = warm is None and start is None and hessian_guess is None
    if not cold and not _settled(run, n):
        # the warm start stopped short of the optimum (or there is none): do it from zero
        again = fit_logit_blocks(
            blocks, labels, mask, penalty, final_hessian=final_hessian, tol=tol, max_iter=max_iter
        )
        again.cold_refit = True
        return again
    if final_hessian and not run.fresh:
        _, _, H_end = objective(run.theta, True, want_loss=False)
        assert H_end is not None
        run.H, run.fresh, run.H_at = H_end, True, run.theta.copy()
    return _as_fit(run, objective.active, blocks[0].shape[1], n)


def _first_state(
    objective: _Objective,
    blocks: Sequence[np.ndarray],
    labels: Sequence[np.ndarray],
    mask: np.ndarray,
    penalty: float,
    warm: LogitFit | None,
    start: StartState | None,
    hessian_guess: np.ndarray | None,
) -> _Newton:
    """Where Newton's method starts: the warm fit or zero (or a subsample's fit), and the
    objective, gradient and Hessian there (given, guessed or computed)."""
    active, n = objective.active, objective.n
    theta = np.zeros(blocks[0].shape[1] + 1)
    coarse = None
    if warm is not None:
        theta[0] = warm.intercept
        theta[active[1:]] = warm.coef[active[1:] - 1]
    elif start is None and n >= 4 * COARSE_ROWS:
        coarse = _coarse_start(blocks, labels, mask, penalty, n)
    if start is not None:
        return _Newton(theta, start.objective, start.gradient, start.hessian, True)
    if hessian_guess is not None:
        f, g, _ = objective(theta, False)
        return _Newton(theta, f, g, hessian_guess, False)
    if coarse is not None:
        theta = coarse[0]
        f, g, _ = objective(theta, False)
        return _Newton(theta, f, g, coarse[1], False)
    f, g, H = objective(theta, True)
    assert H is not None
    return _Newton(theta, f, g, H, True)


def _as_fit(run: _Newton, active: np.ndarray, p: int, n: int) -> LogitFit:
    """The fit in the full design space (zeros outside the active columns) from Newton's run."""
    coef = np.zeros(p)
    coef[active[1:] - 1] = run.theta[active[1:]]
    hess = run.H if run.fresh else None
    return LogitFit(
        float(run.theta[0]),
        coef,
        float(run.f),
        n,
        hess,
        run.g,
        converged=run.converged,
        curvature=run.H,
        curvature_at=run.H_at,
    )


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


# --------------------------------------------------------------------------- fit checks


@dataclass(frozen=True)
class FitCheck:
    """What ``check_fit`` found about one fit (see docs/methods.md, "Convergence and
    separation checks").

    ``separation`` is "complete" (a direction puts every row strictly on the side of its
    outcome), "quasi-complete" (every row on its side or on the boundary, some strictly),
    "unresolved" (the linear program did not settle within LP_ROUNDS) or None (overlap: a
    finite unpenalised optimum exists). ``how`` says what settled it:
    "one outcome", "bound" or "rows" (an overlap certificate), "lp" (the linear program).
    """

    rows: int
    columns: int  # intercept + the model's columns
    one_outcome: bool
    separation: str | None
    separated_rows: int  # rows the separating direction puts strictly on their side
    separating_columns: tuple[int, ...]  # design columns of that direction, largest first
    large_coefs: tuple[int, ...]  # design columns with |coefficient| > COEF_BOUND
    converged: bool
    cold_refit: bool
    how: str

    @property
    def more_columns_than_rows(self) -> bool:
        return self.columns > self.rows

    @property
    def problems(self) -> list[str]:
        """The problem codes, most basic first (empty for a sound fit)."""
        out: list[str] = []
        if self.one_outcome:
            out.append("one_outcome")
        if self.more_columns_than_rows:
            out.append("more_columns_than_rows")
        if self.separation == "complete" and not self.one_outcome:
            out.append("complete_separation")
        if self.separation == "quasi-complete":
            out.append("quasi_complete_separation")
        if self.separation == "unresolved":
            out.append("separation_not_ruled_out")
        if self.large_coefs:
            out.append("coefficient_past_bound")
        if not self.converged:
            out.append("not_converged")
        return out


def check_fit(
    blocks: Sequence[np.ndarray],
    labels: Sequence[np.ndarray],
    mask: np.ndarray,
    penalty: float,
    fit: LogitFit,
    col_max: np.ndarray | None = None,
) -> FitCheck:
    """Check one fit for separation and degeneracy (vectorised; usually without a pass).

    Overlap (no separation) is shown by a certificate: weights w > 0 with Σ w_i a_i = 0, where
    a_i = ±x̃_i (sign of the outcome). At any point the residuals w_i = |y_i − p_i| > 0 almost
    do it: Σ w_i a_i = −g₀, the unpenalised gradient. One Newton correction with the data
    Hessian H₀ fixes the rest and keeps every weight positive if |a_iᵀH₀⁻¹g₀| < 1 for all rows
    (then no direction beta with all a_i·beta ≥ 0, one > 0, can exist: Stiemke's
    alternative). That is bounded first from each column's largest |value| (no pass over the
    rows; an older Hessian is allowed, with its distance bounded), then checked row by row
    (one pass). Failing both, the linear program of Konis (2007) decides: maximise Σ a_i·beta
    subject to a_i·beta ≥ 0 and −1 ≤ beta ≤ 1, solved by constraint generation (a few
    thousand rows at a time, every row checked each round), exact at any size.

    Parameters
    ----------
    blocks, labels, mask, penalty : the fit's rows, labels, columns and penalty
    fit : the fit to check
    col_max : (p,) largest |value| of each design column over these rows, when known
    """
    n = int(sum(len(b) for b in blocks))
    cols = np.flatnonzero(mask)
    k = len(cols) + 1
    total = float(sum(float(y.sum()) for y in labels))
    one_outcome = total == 0.0 or total == float(n)
    large = tuple(int(j) for j in cols[np.abs(fit.coef[cols]) > COEF_BOUND])
    if col_max is None:
        col_max = np.max([np.abs(b).max(axis=0) for b in blocks if len(b)], axis=0)
    separation: str | None = None
    separated, direction = 0, np.zeros(0)
    if one_outcome:
        separation, separated, how = "complete", n, "one outcome"
    elif _overlap_by_bound(fit, penalty, cols, col_max):
        how = "bound"
    elif _overlap_by_rows(blocks, labels, mask, penalty, fit):
        how = "rows"
    else:
        how = "lp"
        separation, separated, direction = _separation_lp(blocks, labels, cols)
    sep_cols: tuple[int, ...] = ()
    if len(direction):
        order = np.argsort(-np.abs(direction[1:]) * col_max[cols], kind="stable")
        sep_cols = tuple(int(cols[j]) for j in order if abs(direction[1 + j]) > 1e-9)
    return FitCheck(
        rows=n,
        columns=k,
        one_outcome=one_outcome,
        separation=separation,
        separated_rows=separated,
        separating_columns=sep_cols,
        large_coefs=large,
        converged=fit.converged,
        cold_refit=fit.cold_refit,
        how=how,
    )


def _data_parts(
    fit: LogitFit, penalty: float, cols: np.ndarray
) -> tuple[np.ndarray, np.ndarray] | None:
    """theta over [intercept, cols] and the unpenalised gradient there, from the fit."""
    if fit.gradient is None:
        return None
    theta = np.concatenate([[fit.intercept], fit.coef[cols]])
    g0 = np.array(fit.gradient, dtype=np.float64)
    g0[1:] -= penalty * theta[1:]
    return theta, g0


def _overlap_by_bound(fit: LogitFit, penalty: float, cols: np.ndarray, col_max: np.ndarray) -> bool:
    """The overlap certificate from column maxima alone (no pass over the rows).

    With H' the data Hessian at an earlier point θ' and D ≥ max_i |x̃_iᵀ(θ − θ')|,
    e^{−D} H' ⪯ H₀(θ) ⪯ e^{D} H' (each weight p(1 − p) changes by at most e^{±D}). With
    u' = H'⁻¹g₀ and R² ≥ max_i |x̃_i|², |x̃_iᵀH₀(θ)⁻¹g₀| ≤ Σ_j M_j |u'_j| + e^{D}(e^{D} − 1) R
    sqrt(g₀ᵀu' / λ_min(H')), M_j the largest |x_ij|. Below 1 − margin: overlap.
    """
    parts = _data_parts(fit, penalty, cols)
    H, at = fit.curvature, fit.curvature_at
    if parts is None or H is None or at is None:
        return False
    theta, g0 = parts
    H0 = np.array(H, dtype=np.float64)
    H0[1:, 1:] -= penalty * np.eye(len(H0) - 1)
    M = np.concatenate([[1.0], col_max[cols]])
    if not np.isfinite(M).all() or not np.isfinite(g0).all():
        return False
    try:
        factor = cho_factor(H0, lower=True)
    except np.linalg.LinAlgError:
        return False
    u = cho_solve(factor, g0)
    main = float(M @ np.abs(u))
    earlier = np.concatenate([[at[0]], at[1:][cols]])
    D = float(M @ np.abs(theta - earlier))
    extra = 0.0
    if D > 0:
        if D > 30:
            return False
        lam_min = float(eigh(H0, eigvals_only=True, subset_by_index=[0, 0])[0])
        if lam_min <= 0:
            return False
        R = float(np.sqrt(M @ M))
        extra = np.exp(D) * np.expm1(D) * R * np.sqrt(max(float(g0 @ u), 0.0) / lam_min)
    return bool(main + extra < 1.0 - CERTIFICATE_MARGIN)


def _overlap_by_rows(
    blocks: Sequence[np.ndarray],
    labels: Sequence[np.ndarray],
    mask: np.ndarray,
    penalty: float,
    fit: LogitFit,
) -> bool:
    """The overlap certificate row by row: w_i + Δ_i > 0 with the exact Hessian at the fit.

    Δ = V A H₀⁺ g₀ (V = diag p(1 − p)) gives Σ (w_i + Δ_i) a_i = 0; w_i + Δ_i =
    w_i (1 + (1 − w_i) a_iᵀH₀⁺g₀). One pass for the Hessian if the fit kept none at its
    optimum, one for the rows.
    """
    cols = np.flatnonzero(mask)
    parts = _data_parts(fit, penalty, cols)
    if parts is None:
        return False
    g0 = parts[1]
    full = np.concatenate([[fit.intercept], fit.coef])
    if fit.hessian is not None:
        H0 = np.array(fit.hessian, dtype=np.float64)
        H0[1:, 1:] -= penalty * np.eye(len(H0) - 1)
    else:
        _, _, H0_all = _accumulate(blocks, labels, full, True, want_loss=False)
        assert H0_all is not None
        active = np.concatenate([[0], cols + 1])
        H0 = H0_all[np.ix_(active, active)]
    vals, vecs = eigh(H0)
    keep = vals > vals.max() * 1e-12 if vals.max() > 0 else np.zeros(len(vals), dtype=bool)
    if not keep.any():
        return False
    u = vecs[:, keep] @ ((vecs[:, keep].T @ g0) / vals[keep])
    if np.abs(H0 @ u - g0).max() > 1e-8 * max(float(np.abs(g0).max()), 1e-300):
        return False  # the gradient is not in the Hessian's range to rounding
    u_full = np.zeros(len(full))
    u_full[0] = u[0]
    u_full[cols + 1] = u[1:]
    for X, y in zip(blocks, labels, strict=True):
        step = _chunk_rows(X.shape[1])
        for s in range(0, len(X), step):
            Xc, yc = X[s : s + step], y[s : s + step]
            sign = 2.0 * yc - 1.0
            eta = Xc @ full[1:] + full[0]
            t = sign * (Xc @ u_full[1:] + u_full[0])
            with np.errstate(over="ignore"):
                w = 1.0 / (1.0 + np.exp(sign * eta))  # |y − p|, without cancellation
            if not (w > 0).all() or ((1.0 - w) * t <= -1.0 + CERTIFICATE_MARGIN).any():
                return False
    return True


def _signed_rows(
    blocks: Sequence[np.ndarray],
    labels: Sequence[np.ndarray],
    beta: np.ndarray,
) -> np.ndarray:
    """a_i·beta for every row, in block order (beta over [intercept, all p columns])."""
    out = []
    for X, y in zip(blocks, labels, strict=True):
        out.append((2.0 * y - 1.0) * (X @ beta[1:] + beta[0]))
    return np.concatenate(out) if out else np.zeros(0)


def _separation_lp(
    blocks: Sequence[np.ndarray],
    labels: Sequence[np.ndarray],
    cols: np.ndarray,
) -> tuple[str | None, int, np.ndarray]:
    """Separation by linear programming (Konis 2007), with constraint generation.

    Maximise Σ_i a_i·beta subject to a_i·beta ≥ 0 for every row and −1 ≤ beta ≤ 1: the data
    are separated iff the optimum is positive. The program is solved on a working set of rows;
    every round checks the solution on all rows and adds the most violated ones, so the
    final direction is feasible for every row and optimal (Bertsimas & Tsitsiklis 1997, §6.3).
    Complete separation: a second program maximises min_i a_i·beta.

    Returns (kind or None, rows strictly separated, direction over [intercept, cols]).
    """
    lp = _SeparationLP.of(blocks, labels, cols)
    n, k = lp.n, lp.k
    first = _solve_separation(lp, maximin=False)
    if first is None:  # not settled within LP_ROUNDS: report it as a possible separation
        return "unresolved", 0, np.zeros(k)
    beta, s = first
    strict = int(np.count_nonzero(s > LP_ROW_TOL))
    if strict == 0:
        return None, 0, np.zeros(k)
    if strict == n:
        return "complete", n, beta
    second = _solve_separation(lp, maximin=True)
    if second is not None and float(second[1].min()) > LP_ROW_TOL:
        return "complete", n, second[0]
    return "quasi-complete", strict, beta


@dataclass(frozen=True)
class _SeparationLP:
    """The separation program's data: the row blocks and labels, the columns in play, each
    block's first row, and the objective ``c`` = Σ_i a_i over [intercept, cols]."""

    blocks: Sequence[np.ndarray]
    labels: Sequence[np.ndarray]
    cols: np.ndarray
    starts: np.ndarray
    c: np.ndarray

    @property
    def n(self) -> int:
        return int(self.starts[-1])

    @property
    def k(self) -> int:
        return len(self.cols) + 1

    @classmethod
    def of(
        cls, blocks: Sequence[np.ndarray], labels: Sequence[np.ndarray], cols: np.ndarray
    ) -> _SeparationLP:
        starts = np.cumsum([0] + [len(b) for b in blocks])
        c = np.zeros(len(cols) + 1)
        for X, y in zip(blocks, labels, strict=True):
            sign = 2.0 * y - 1.0
            c[0] += sign.sum()
            c[1:] += (sign @ X)[cols]
        return cls(blocks, labels, cols, starts, c)

    def gather(self, idx: np.ndarray) -> np.ndarray:
        """The signed rows a_i = (2y_i − 1)·[1, x_i[cols]] for global row numbers ``idx``."""
        rows = np.empty((len(idx), self.k))
        which = np.searchsorted(self.starts, idx, side="right") - 1
        for b in np.unique(which):
            sel = which == b
            local = idx[sel] - self.starts[b]
            rows[sel, 0] = 1.0
            rows[sel, 1:] = self.blocks[b][local][:, self.cols]
            rows[sel] *= (2.0 * self.labels[b][local] - 1.0)[:, None]
        return rows

    def full_beta(self, beta: np.ndarray) -> np.ndarray:
        """A direction over [intercept, cols] spread over [intercept, every column]."""
        out = np.zeros(self.blocks[0].shape[1] + 1)
        out[0] = beta[0]
        out[self.cols + 1] = beta[1:]
        return out


def _lp_solve_once(lp: _SeparationLP, A: np.ndarray, maximin: bool) -> Any:
    """One program on the working rows ``A``: maximise Σ a_i·beta (or, ``maximin``, t with
    a_i·beta ≥ t) subject to a_i·beta ≥ 0 and −1 ≤ beta ≤ 1."""
    from scipy.optimize import linprog  # here: reading a snapshot must not import it

    k = lp.k
    if maximin:  # variables [beta, t]: maximise t, a_i·beta ≥ t
        return linprog(
            np.r_[np.zeros(k), -1.0],
            A_ub=np.column_stack([-A, np.ones(len(A))]),
            b_ub=np.zeros(len(A)),
            bounds=[(-1.0, 1.0)] * k + [(None, 1.0)],
            method="highs",
            options=_LP_OPTIONS,
        )
    return linprog(
        -lp.c,
        A_ub=-A,
        b_ub=np.zeros(len(A)),
        bounds=[(-1.0, 1.0)] * k,
        method="highs",
        options=_LP_OPTIONS,
    )


def _solve_separation(lp: _SeparationLP, maximin: bool) -> tuple[np.ndarray, np.ndarray] | None:
    """Constraint generation: solve on a working set of rows, add the most violated rows of
    all, repeat; (direction, every row's a_i·beta), or None if not settled in LP_ROUNDS."""
    n, k = lp.n, lp.k
    work = np.unique(np.linspace(0, n - 1, min(n, LP_ROWS)).astype(np.int64))
    for _ in range(LP_ROUNDS):
        res = _lp_solve_once(lp, lp.gather(work), maximin)
        if res.status != 0 or res.x is None:
            return None
        beta = np.asarray(res.x[:k], dtype=np.float64)
        s = _signed_rows(lp.blocks, lp.labels, lp.full_beta(beta))
        if maximin:
            t = float(res.x[k])
            low = s < t - LP_VIOLATION
        else:
            low = s < -LP_VIOLATION
        if not low.any():
            return beta, s
        bad = np.flatnonzero(low)
        worst = bad[np.argsort(s[bad], kind="stable")[:LP_ROWS]]
        work = np.union1d(work, worst)
    return None


_LP_OPTIONS = {
    "primal_feasibility_tolerance": 1e-10,
    "dual_feasibility_tolerance": 1e-10,
}
