"""Every model's weights on the data's own scale, with standard errors and odds ratios.

The suite fits on standardised numeric features; a weight w on a standardised feature is
w / sd per unit of the raw feature and the intercept absorbs the centring (b − Σ w·mean/sd).
Categorical columns are indicators against the feature's reference level (its first level).
Standard errors come from the inverse Hessian of the whole-history fit, carried to the raw
scale by the same linear map (cov_raw = A H⁻¹ Aᵀ); with a penalty > 0 they are those of the
penalised fit. Intervals are Wald intervals, w ± z·se, and odds ratios exp(w) with exp of the
interval (Hosmer, Lemeshow & Sturdivant, *Applied Logistic Regression*, 3rd ed., §1.3).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
from scipy.special import logit
from scipy.stats import norm

from closecall.suite.snapshot import Snapshot
from closecall.suite.solver import LogitFit, hessian


def _full_training_rows(snap: Snapshot, model: str, row: int) -> np.ndarray:
    """History rows of a whole-history fit: all of them, or group ``row`` for the split model."""
    hg = np.asarray(snap.hist_group_codes)
    return np.flatnonzero(hg == row) if model == "split" else np.arange(len(hg))


def _raw_map(snap: Snapshot, mask: np.ndarray) -> np.ndarray:
    """A with raw = A·[b, w_active] (standardised -> per unit of the raw feature)."""
    mean = np.zeros(len(mask))
    sd = np.ones(len(mask))
    i = 0
    for f in snap.encoder.features:
        for name in f.design_names():
            if f.kind == "numeric" and name == f.name:
                mean[i], sd[i] = f.mean, f.sd
            i += 1
    active = np.flatnonzero(mask)
    k = 1 + len(active)
    A = np.eye(k)
    A[0, 1:] = -mean[active] / sd[active]
    A[np.arange(1, k), np.arange(1, k)] = 1.0 / sd[active]
    return A


def model_weights(snap: Snapshot, level: float = 0.95) -> dict[str, Any]:
    """Whole-history weights of every fitted model of the suite, on the data's own scale.

    Parameters
    ----------
    snap
        The study's snapshot.
    level
        Confidence level of the intervals.

    Returns
    -------
    dict
        ``{"level", "penalty", "thresholds": {lens: log-odds}, "models": [...]}``; each model
        entry has ``model``, ``fit`` (``"all"`` or the group level of a split fit) and
        ``rows``: one per weight (``term`` — ``(intercept)`` first —, ``weight``, ``se``,
        ``odds_ratio``, ``low``, ``high``, ``or_low``, ``or_high``, ``group`` (a weight of the
        group attribute), ``proxy`` (of a flagged proxy)). Models with imported scores have no
        weights and are listed in ``"imported"``; a deployed scorecard (docs/scorecard.md) has
        points instead, and ``"scorecard"`` names its model and file (None without a card).
    """
    z = float(norm.ppf(0.5 + level / 2))
    names = np.array(["(intercept)", *snap.columns])
    source = np.array(snap.meta["column_source"])
    group_cols = np.asarray(snap.encoder.group_mask)
    proxies = set(snap.proxies.proxies) if snap.proxies is not None else set()
    proxy_cols = np.isin(source, sorted(proxies))
    X = np.asarray(snap.hist_X)
    penalty = float(snap.meta["penalty"])
    models: list[dict[str, Any]] = []
    imported: list[str] = []
    for model in snap.model_names:
        full = np.asarray(snap.arrays.get(f"fullW__{model}", np.zeros((0, 0))))
        if full.size == 0:
            if model != "deployed" or "deployed_card" not in snap.meta:
                imported.append(model)
            continue
        for row, w in enumerate(full):
            if model == "split":
                train = _full_training_rows(snap, model, row)
                sub = X[train]
                mask = ~group_cols & (sub.max(axis=0) > sub.min(axis=0))
            else:
                train = _full_training_rows(snap, model, row)
                mask = np.array(snap.meta["masks"][model], dtype=bool)
            fit = LogitFit(float(w[0]), np.asarray(w[1:], dtype=float), 0.0, len(train))
            cov = np.linalg.pinv(hessian(X[train], mask, fit, penalty))
            A = _raw_map(snap, mask)
            est = A @ np.concatenate([[w[0]], np.asarray(w[1:])[mask]])
            se = np.sqrt(np.clip(np.diag(A @ cov @ A.T), 0.0, None))
            idx = np.concatenate([[0], 1 + np.flatnonzero(mask)])
            low, high = est - z * se, est + z * se
            rows = [
                {
                    "term": str(names[j]),
                    "weight": float(est[k]),
                    "se": float(se[k]),
                    "odds_ratio": float(np.exp(est[k])),
                    "low": float(low[k]),
                    "high": float(high[k]),
                    "or_low": float(np.exp(low[k])),
                    "or_high": float(np.exp(high[k])),
                    "group": bool(j > 0 and group_cols[j - 1]),
                    "proxy": bool(j > 0 and proxy_cols[j - 1]),
                }
                for k, j in enumerate(idx)
            ]
            fit_name = str(snap.group_levels[row]) if model == "split" else "all"
            models.append({"model": model, "fit": fit_name, "rows": rows})
    return {
        "level": level,
        "penalty": penalty,
        "thresholds": {lens.name: float(logit(lens.threshold)) for lens in snap.lenses},
        "models": models,
        "imported": imported,
        "scorecard": _scorecard(snap),
    }


def _scorecard(snap: Snapshot) -> dict[str, str] | None:
    """The deployed scorecard's model and file name (None without a card)."""
    if "deployed_card" not in snap.meta:
        return None
    return {"model": "deployed", "file": Path(snap.meta["deployed_card"]["card"]["source"]).name}
