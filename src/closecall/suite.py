"""Fit the model suite: pooled, unaware, proxy-free, split (one per group) and deployed.

Every model lives in one design space: a model that may not use a column has a zero weight
there. Each model is fitted once on the whole history and once per fold (K-fold, stratified by
group × outcome, warm-started from the whole-history fit). The out-of-fold scores give honest
held-out metrics; with one labelled file they are also the scores under review
(cross-fitting), so no case is scored by a model that saw its own outcome. With a pending file,
pending cases are scored by the whole-history fits.

For each model and scored case we keep which fitted coefficient row scored it, the log-odds, and
x̃ᵀH⁻¹x̃ under that row's Hessian (the basis of the bands, see analysis/multiplicity.py).

References
----------
Dwork, Immorlica, Kalai, Leiserson, "Decoupled classifiers for group-fair and efficient machine
learning", FAT* 2018 (the split model).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.special import expit, logit
from sklearn.metrics import roc_auc_score
from sklearn.model_selection import StratifiedKFold

from closecall.analysis.proxies import ProxyReport, detect_proxies
from closecall.config import StudyConfig
from closecall.data import StudyData
from closecall.encode import Encoder, fit_encoder
from closecall.logit import (
    LogitFit,
    cholesky_lower,
    fit_logit,
    hessian,
    negative_log_likelihood,
    quadratic_form,
)

Progress = Callable[[str, int, int], None]
FITTED_MODELS = ("pooled", "unaware", "proxy_free", "split")


def _quiet(label: str, done: int, total: int) -> None:
    return None


@dataclass
class ModelScores:
    """One model's fitted rows and its scores for the cases under review."""

    name: str
    W: np.ndarray  # (m, p+1): [intercept, coef] of each fitted row
    row_of_case: np.ndarray  # (n_scored,) which row of W scored each case; -1 = imported
    objective: np.ndarray  # (m,) penalised total NLL of each row at its optimum
    n_train: np.ndarray  # (m,)
    logit: np.ndarray  # (n_scored,) log-odds of the favourable outcome
    quad: np.ndarray  # (n_scored,) x̃ᵀH⁻¹x̃ (NaN for imported scores)
    oof_logit: np.ndarray  # (n_history,) out-of-fold log-odds on the history (NaN if none)
    full_W: np.ndarray  # (g, p+1) whole-history fit(s): one row, or one per group for split


@dataclass
class SuiteResult:
    encoder: Encoder
    group_levels: list[str]
    X: np.ndarray  # scored cases' design matrix
    group_codes: np.ndarray  # scored cases
    case_ids: np.ndarray
    outcome: np.ndarray  # scored cases: 1/0, -1 unknown
    hist_X: np.ndarray
    hist_y: np.ndarray
    hist_group_codes: np.ndarray
    hist_ids: np.ndarray
    fold: np.ndarray  # history rows: fold index
    models: dict[str, ModelScores]
    proxies: ProxyReport
    masks: dict[str, list[bool]]
    metrics: list[dict[str, Any]]
    notes: list[str] = field(default_factory=list)


def _strata(y: np.ndarray, g: np.ndarray) -> np.ndarray:
    return g.astype(np.int64) * 2 + y


def _nonconstant(X: np.ndarray, rows: np.ndarray, mask: np.ndarray) -> np.ndarray:
    sub = X[rows]
    return mask & (sub.max(axis=0) > sub.min(axis=0))


def fit_suite(config: StudyConfig, data: StudyData, progress: Progress = _quiet) -> SuiteResult:
    """Fit every model of the suite and score the cases under review."""
    penalty = config.model.penalty
    K = config.model.folds
    progress("encoding", 0, 1)
    encoder = fit_encoder(data.history, data.features, data.group_columns)
    hist_X, unseen_h = encoder.transform(data.history)
    levels = sorted(set(data.history_group.tolist()))
    level_array = np.array(levels)
    hg = np.searchsorted(level_array, data.history_group)
    y = data.y.astype(np.int8)
    G = len(levels)
    notes = list(data.notes)

    group_mask = encoder.group_mask
    nongroup = ~group_mask

    progress("fitting whole-history models", 0, 1)
    full: dict[str, list[LogitFit]] = {}
    masks: dict[str, list[np.ndarray]] = {}
    full["pooled"] = [fit_logit(hist_X, y, np.ones_like(group_mask), penalty)]
    masks["pooled"] = [np.ones_like(group_mask)]
    full["unaware"] = [fit_logit(hist_X, y, nongroup, penalty)]
    masks["unaware"] = [nongroup]

    progress("scoring proxies", 0, 1)
    raw: dict[str, tuple[str, np.ndarray]] = {}
    for ef in encoder.features:
        if ef.is_group:
            continue
        cols = encoder.source_mask([ef.name])
        if ef.kind == "numeric":
            raw[ef.name] = ("numeric", hist_X[:, np.flatnonzero(cols)[0]])
        else:
            block = hist_X[:, cols]
            codes = np.where(block.any(axis=1), block.argmax(axis=1) + 1, 0)
            raw[ef.name] = ("categorical", codes)
    proxies = detect_proxies(
        raw_columns=raw,
        X=hist_X,
        unaware_coef=full["unaware"][0].coef,
        column_source=encoder.column_source,
        group_codes=hg,
        n_levels=G,
        association_threshold=config.proxies.association,
        influence_threshold=config.proxies.influence,
        extra=config.proxies.extra,
        never=config.proxies.never,
        seed=config.seed,
        nongroup_mask=nongroup,
    )
    proxy_free_mask = nongroup & ~encoder.source_mask(proxies.proxies)
    if not proxy_free_mask.any():
        notes.append("every non-group feature is a proxy: the proxy-free model is intercept-only")
    full["proxy_free"] = [fit_logit(hist_X, y, proxy_free_mask, penalty)]
    masks["proxy_free"] = [proxy_free_mask]
    full["split"], masks["split"] = [], []
    for g in range(G):
        rows = np.flatnonzero(hg == g)
        m = _nonconstant(hist_X, rows, nongroup)
        full["split"].append(fit_logit(hist_X[rows], y[rows], m, penalty))
        masks["split"].append(m)

    # ---- cross-fitting
    skf = StratifiedKFold(n_splits=K, shuffle=True, random_state=config.seed)
    fold = np.empty(len(y), dtype=np.int16)
    oof = {name: np.full(len(y), np.nan) for name in FITTED_MODELS}
    fold_fits: dict[str, list[LogitFit]] = {name: [] for name in FITTED_MODELS}
    fold_masks: dict[str, list[np.ndarray]] = {name: [] for name in FITTED_MODELS}
    fold_rows: dict[str, list[np.ndarray]] = {name: [] for name in FITTED_MODELS}
    splits = list(skf.split(hist_X, _strata(y, hg)))
    for k, (train, test) in enumerate(splits):
        progress("cross-fitting", k, K)
        fold[test] = k
        for name in ("pooled", "unaware", "proxy_free"):
            m = masks[name][0]
            fit = fit_logit(hist_X[train], y[train], m, penalty, warm=full[name][0])
            oof[name][test] = fit.logit(hist_X[test])
            fold_fits[name].append(fit)
            fold_masks[name].append(m)
            fold_rows[name].append(train)
        for g in range(G):
            tr = train[hg[train] == g]
            te = test[hg[test] == g]
            m = _nonconstant(hist_X, tr, nongroup)
            fit = fit_logit(hist_X[tr], y[tr], m, penalty, warm=full["split"][g])
            oof["split"][te] = fit.logit(hist_X[te])
            fold_fits["split"].append(fit)
            fold_masks["split"].append(m)
            fold_rows["split"].append(tr)
    progress("cross-fitting", K, K)

    # ---- the cases under review
    if data.pending is None:
        X, codes, ids = hist_X, hg, data.history[config.data.id].astype(str).to_numpy(dtype=str)
        outcome = y.astype(np.int8)
        rows_fits, rows_masks, rows_train = fold_fits, fold_masks, fold_rows
        row_of_case = {
            name: (fold.astype(np.int32) * G + hg if name == "split" else fold.astype(np.int32))
            for name in FITTED_MODELS
        }
    else:
        X, unseen_p = encoder.transform(data.pending)
        for col, count in unseen_p.items():
            notes.append(
                f"{count} pending case(s) have a '{col}' value the history lacks; "
                "coded as the reference level"
            )
        assert data.pending_group is not None
        codes = np.searchsorted(level_array, data.pending_group)
        ids = data.pending[config.data.id].astype(str).to_numpy(dtype=str)
        outcome = np.full(len(ids), -1, dtype=np.int8)
        rows_fits, rows_masks = full, masks
        rows_train = {name: [np.arange(len(y))] for name in ("pooled", "unaware", "proxy_free")}
        rows_train["split"] = [np.flatnonzero(hg == g) for g in range(G)]
        row_of_case = {name: np.zeros(len(ids), dtype=np.int32) for name in FITTED_MODELS}
        row_of_case["split"] = codes.astype(np.int32)
    for col, count in unseen_h.items():
        notes.append(f"{count} history case(s) have an unseen '{col}' value")

    progress("bands", 0, 1)
    models: dict[str, ModelScores] = {}
    for name in FITTED_MODELS:
        fits = rows_fits[name]
        W = np.array([[f.intercept, *f.coef] for f in fits])
        rc = row_of_case[name]
        lg = np.empty(len(ids))
        quad = np.empty(len(ids))
        for r, f in enumerate(fits):
            sel = np.flatnonzero(rc == r)
            if len(sel) == 0:
                continue
            lg[sel] = f.logit(X[sel])
            tr = rows_train[name][r]
            H = hessian(hist_X[tr], rows_masks[name][r], f, penalty)
            quad[sel] = quadratic_form(X[sel], rows_masks[name][r], cholesky_lower(H))
        models[name] = ModelScores(
            name=name,
            W=W,
            row_of_case=rc,
            objective=np.array([f.objective for f in fits]),
            n_train=np.array([f.n for f in fits]),
            logit=lg,
            quad=quad,
            oof_logit=oof[name],
            full_W=np.array([[f.intercept, *f.coef] for f in full[name]]),
        )
    if data.deployed_probability is not None:
        dl = logit(data.deployed_probability)
        models["deployed"] = ModelScores(
            name="deployed",
            W=np.zeros((0, X.shape[1] + 1)),
            row_of_case=np.full(len(ids), -1, dtype=np.int32),
            objective=np.zeros(0),
            n_train=np.zeros(0),
            logit=dl,
            quad=np.full(len(ids), np.nan),
            oof_logit=dl if data.pending is None else np.full(len(y), np.nan),
            full_W=np.zeros((0, X.shape[1] + 1)),
        )
    progress("held-out metrics", 0, 1)
    metrics = held_out_metrics(models, y, hg, levels, config)
    return SuiteResult(
        encoder=encoder,
        group_levels=levels,
        X=X,
        group_codes=codes.astype(np.int32),
        case_ids=ids,
        outcome=outcome,
        hist_X=hist_X,
        hist_y=y,
        hist_group_codes=hg.astype(np.int32),
        hist_ids=data.history[config.data.id].astype(str).to_numpy(dtype=str),
        fold=fold,
        models=models,
        proxies=proxies,
        masks={k: [bool(b) for b in v[0]] for k, v in masks.items() if k != "split"},
        metrics=metrics,
        notes=notes,
    )


def held_out_metrics(
    models: dict[str, ModelScores],
    y: np.ndarray,
    groups: np.ndarray,
    levels: list[str],
    config: StudyConfig,
) -> list[dict[str, Any]]:
    """Per group and overall: held-out log-loss, AUC, error rate per lens, calibration."""
    rows: list[dict[str, Any]] = []
    for name, ms in models.items():
        eta = ms.oof_logit
        if np.isnan(eta).all():
            continue
        for gi, label in [*enumerate(levels), (-1, "all")]:
            sel = np.ones(len(y), dtype=bool) if gi < 0 else groups == gi
            sel &= ~np.isnan(eta)
            yy, ee = y[sel], eta[sel]
            if len(yy) == 0:
                continue
            p = expit(ee)
            row: dict[str, Any] = {
                "model": name,
                "group": label,
                "cases": len(yy),
                "log_loss": negative_log_likelihood(ee, yy) / len(yy),
                "auc": float(roc_auc_score(yy, ee)) if 0 < yy.sum() < len(yy) else None,
                "calibration_in_the_large": float(yy.mean() - p.mean()),
            }
            for lens in config.lenses:
                row[f"error_rate[{lens.name}]"] = float(((p > lens.threshold) != (yy == 1)).mean())
            rows.append(row)
    return rows
