"""Rebuild what a fitted coefficient row was trained on: its history rows, columns and Hessian.

A snapshot stores each model's fitted rows ``W`` and which row scored each case, but not the
Hessians (they are only needed for the exact band, the discrepancy search and the tests). They
are recomputed here, lazily, from the stored history, folds and masks, with exactly the rules
the suite used:

- one labelled file (cross-fitting): row k of pooled / unaware / proxy-free was trained on the
  history outside fold k; row k·G + g of the split model on group g outside fold k;
- history + pending: row 0 was trained on the whole history; split row g on group g.

The split model leaves out the columns that are constant among its training rows.
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass

import numpy as np
from scipy.special import log_expit

from closecall.suite.snapshot import Snapshot
from closecall.suite.solver import LogitFit, cholesky_lower, hessian

_CACHE_SIZE = 32
_CHOL_CACHE: OrderedDict[tuple[str, str, int], np.ndarray] = OrderedDict()


@dataclass(frozen=True)
class FittedRow:
    """One fitted coefficient row of a model and the history it was trained on."""

    model: str
    row: int
    intercept: float
    coef: np.ndarray  # (p,) zeros outside mask
    mask: np.ndarray  # (p,) bool, the columns the row may use
    train: np.ndarray  # history row indices it was trained on
    objective: float  # penalised total negative log-likelihood at the fit (as stored)
    penalty: float

    @property
    def active(self) -> np.ndarray:
        """[intercept, active coefficients] as one vector."""
        return np.concatenate([[self.intercept], self.coef[self.mask]])

    def as_fit(self) -> LogitFit:
        return LogitFit(self.intercept, np.asarray(self.coef), self.objective, len(self.train))


def training_rows(snap: Snapshot, model: str, row: int) -> np.ndarray:
    """History row indices that fitted row ``row`` of ``model`` was trained on."""
    G = len(snap.group_levels)
    hg = np.asarray(snap.hist_group_codes)
    if snap.cross_fitted:
        fold = np.asarray(snap.arrays["fold"])
        if model == "split":
            k, g = divmod(row, G)
            return np.flatnonzero((fold != k) & (hg == g))
        return np.flatnonzero(fold != row)
    if model == "split":
        return np.flatnonzero(hg == row)
    return np.arange(len(hg))


def row_mask(snap: Snapshot, model: str, row: int, train: np.ndarray | None = None) -> np.ndarray:
    """The design columns fitted row ``row`` of ``model`` may use."""
    group_mask = snap.encoder.group_mask
    if model != "split":
        return np.array(snap.meta["masks"][model], dtype=bool)
    if train is None:
        train = training_rows(snap, model, row)
    sub = np.asarray(snap.hist_X)[train]
    mask: np.ndarray = ~group_mask & (sub.max(axis=0) > sub.min(axis=0))
    return mask


def fitted_row(snap: Snapshot, model: str, row: int) -> FittedRow:
    """A model's fitted row with its training rows and columns."""
    W, _ = snap.weights(model)
    if not 0 <= row < len(W):
        raise ValueError(f"model '{model}' has no fitted row {row}")
    train = training_rows(snap, model, row)
    mask = row_mask(snap, model, row, train)
    w = np.asarray(W[row], dtype=float)
    return FittedRow(
        model=model,
        row=row,
        intercept=float(w[0]),
        coef=w[1:].copy(),
        mask=mask,
        train=train,
        objective=float(snap.objective(model)[row]),
        penalty=float(snap.meta["penalty"]),
    )


def row_cholesky(snap: Snapshot, model: str, row: int) -> np.ndarray:
    """Lower Cholesky factor of the row's penalised Hessian over [intercept, active columns].

    Recomputed from the history on first use and kept in a small cache keyed by snapshot id.
    """
    key = (snap.id, model, row)
    if key in _CHOL_CACHE:
        _CHOL_CACHE.move_to_end(key)
        return _CHOL_CACHE[key]
    fr = fitted_row(snap, model, row)
    H = hessian(np.asarray(snap.hist_X)[fr.train], fr.mask, fr.as_fit(), fr.penalty)
    chol = cholesky_lower(H)
    _CHOL_CACHE[key] = chol
    while len(_CHOL_CACHE) > _CACHE_SIZE:
        _CHOL_CACHE.popitem(last=False)
    return chol


def tilde(X: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Rows x̃ = [1, x_active] of a design matrix, shape (n, 1 + active)."""
    X = np.atleast_2d(np.asarray(X, dtype=float))
    return np.hstack([np.ones((len(X), 1)), X[:, mask]])


def penalised_objective(
    w: np.ndarray, Xt: np.ndarray, y: np.ndarray, penalty: float, *, derivatives: bool = True
) -> tuple[float, np.ndarray, np.ndarray]:
    """Penalised total negative log-likelihood, its gradient and Hessian at w = [b, β].

    ``Xt`` is the x̃ design (first column ones); the intercept is not penalised. With
    ``derivatives=False`` only the value is computed (gradient and Hessian are empty).
    """
    eta = Xt @ w
    log_p = log_expit(eta)  # log(1 − p) = log_p − eta
    f = float(((1 - y) * eta - log_p).sum())
    beta = w[1:]
    f += 0.5 * penalty * float(beta @ beta)
    if not derivatives:
        return f, np.empty(0), np.empty((0, 0))
    p = np.exp(log_p)
    grad = Xt.T @ (p - y)
    Hm = (Xt * (p * (1 - p))[:, None]).T @ Xt
    grad[1:] += penalty * beta
    Hm[1:, 1:] += penalty * np.eye(len(beta))
    return f, grad, Hm
