"""Model comparison per group: which model of the suite errs less for whom, and by how much.

Every history case has an out-of-fold score from each fitted model (cross-fitting: the model
that scored it never saw it). Per case we take two losses:

- log-loss: −log p̂ of the recorded outcome (lower is better; it rewards calibrated scores);
- error at the operative cost lens: 1 when the decision p̂ > t disagrees with the outcome.

For each group and each model we compare with the baseline (pooled) model on the *same* cases
(paired differences, model minus baseline; negative = the model errs less) and give a seeded
percentile bootstrap interval of the mean difference. For speed on large histories the
bootstrap resamples random blocks of cases: each group's cases are dealt at random into at most
20,000 blocks and whole blocks are resampled (with one case per block when the group is smaller,
which is the ordinary bootstrap). Cases are independent, so random blocks leave the variance of
a mean unchanged.

A model *helps one group while hurting another* when its interval lies wholly below zero for
one group and wholly above zero for another. The recorded outcomes are what the history says
happened; where they are biased (the demo's are, against Briar) "errs less" means "agrees more
with the biased record".

References
----------
Efron & Tibshirani, "An introduction to the bootstrap", Chapman & Hall 1993 (percentile
intervals, paired comparisons).
Dwork, Immorlica, Kalai, Leiserson, "Decoupled classifiers for group-fair and efficient machine
learning", FAT* 2018 (when a split model helps one group at another's expense).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.special import logit

from closecall.core.numbers import REPLICATES_MAX, check_count, check_seed
from closecall.suite.snapshot import Snapshot

MAX_BLOCKS = 20_000
BOOT_CHUNK = 100
METRICS = ("log_loss", "error")


def case_losses(eta: np.ndarray, y: np.ndarray, threshold: float) -> dict[str, np.ndarray]:
    """Per-case log-loss and 0/1 error at threshold t for log-odds eta and 0/1 outcomes y."""
    log_loss = np.where(y == 1, np.logaddexp(0.0, -eta), np.logaddexp(0.0, eta))
    error = ((eta > float(logit(threshold))) != (y == 1)).astype(float)
    return {"log_loss": log_loss, "error": error}


def block_bootstrap_means(values: np.ndarray, n_boot: int, rng: np.random.Generator) -> np.ndarray:
    """(n_boot, m) bootstrap means of each column of values (n, m), resampling random blocks."""
    n = len(values)
    blocks = min(n, MAX_BLOCKS)
    block_of = np.empty(n, dtype=np.int64)
    block_of[rng.permutation(n)] = np.arange(n) % blocks
    sums = np.column_stack(
        [
            np.bincount(block_of, weights=values[:, j], minlength=blocks)
            for j in range(values.shape[1])
        ]
    )
    sizes = np.bincount(block_of, minlength=blocks).astype(float)
    out = np.empty((n_boot, values.shape[1]))
    for start in range(0, n_boot, BOOT_CHUNK):
        b = min(BOOT_CHUNK, n_boot - start)
        pick = rng.integers(0, blocks, size=(b, blocks))
        # how often each block is drawn in each replicate, then one matrix product
        counts = (
            np.bincount((pick + blocks * np.arange(b)[:, None]).ravel(), minlength=b * blocks)
            .reshape(b, blocks)
            .astype(float)
        )
        out[start : start + b] = (counts @ sums) / (counts @ sizes)[:, None]
    return out


@dataclass
class ModelComparison:
    """Per group × model × metric: value, baseline value, difference and its interval."""

    baseline: str
    lens: str
    level: float
    n_boot: int
    seed: int
    rows: list[dict[str, Any]] = field(default_factory=list)
    tradeoffs: list[dict[str, Any]] = field(default_factory=list)
    best: list[dict[str, Any]] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return {
            "baseline": self.baseline,
            "lens": self.lens,
            "level": self.level,
            "bootstrap_replicates": self.n_boot,
            "seed": self.seed,
            "rows": self.rows,
            "tradeoffs": self.tradeoffs,
            "best": self.best,
        }


def compare_models(
    snap: Snapshot,
    *,
    baseline: str = "pooled",
    lens: str | None = None,
    n_boot: int = 1000,
    seed: int = 0,
    level: float = 0.95,
) -> ModelComparison:
    """Cross-validated comparison of the suite's models per group, with bootstrap intervals.

    Parameters
    ----------
    snap : the snapshot (its out-of-fold history scores are used)
    baseline : the model the others are compared with
    lens : cost lens for the error rate; None = the operative lens
    n_boot : bootstrap replicates
    seed : seed of the bootstrap (same seed, same intervals)
    level : interval coverage
    """
    check_count("n_boot", n_boot, 100, REPLICATES_MAX, example="1000")
    check_seed("seed", seed)
    lens_obj = snap.lens(lens)
    y = np.asarray(snap.hist_y)
    hg = np.asarray(snap.hist_group_codes)
    oof = _out_of_fold_scores(snap, len(y))
    if baseline not in oof:
        raise ValueError(f"baseline model '{baseline}' has no out-of-fold scores")
    models = [m for m in oof if m != baseline]
    ok = np.all([~np.isnan(e) for e in oof.values()], axis=0)
    losses = {m: case_losses(e, y, lens_obj.threshold) for m, e in oof.items()}
    result = ModelComparison(baseline, lens_obj.name, level, n_boot, seed)
    G = len(snap.group_levels)
    for gi, label in [*enumerate(snap.group_levels), (G, "all")]:
        sel = ok & (np.ones_like(ok) if gi == G else hg == gi)
        if sel.any():
            _compare_in_group(result, losses, models, sel, label, np.random.default_rng([seed, gi]))
    result.tradeoffs = _tradeoffs(result.rows, models)
    return result


def _out_of_fold_scores(snap: Snapshot, n_history: int) -> dict[str, np.ndarray]:
    """Each model's out-of-fold history log-odds, for the models that scored the whole history."""
    oof = {
        m: np.asarray(snap.arrays[f"oof__{m}"], dtype=float)
        for m in snap.model_names
        if f"oof__{m}" in snap.arrays
    }
    return {m: e for m, e in oof.items() if len(e) == n_history and not np.isnan(e).all()}


def _compare_in_group(
    result: ModelComparison,
    losses: dict[str, dict[str, np.ndarray]],
    models: list[str],
    sel: np.ndarray,
    label: str,
    rng: np.random.Generator,
) -> None:
    """Add one group's paired differences with their bootstrap intervals, and its best models."""
    n = int(sel.sum())
    base = np.column_stack([losses[result.baseline][k][sel] for k in METRICS])
    diffs = np.hstack(
        [np.column_stack([losses[m][k][sel] for k in METRICS]) - base for m in models]
    )
    boot = block_bootstrap_means(diffs, result.n_boot, rng)
    alpha = (1.0 - result.level) / 2.0
    lo = np.quantile(boot, alpha, axis=0)
    hi = np.quantile(boot, 1.0 - alpha, axis=0)
    mean_diff = diffs.mean(axis=0)
    for a, m in enumerate(models):
        for b, k in enumerate(METRICS):
            j = a * len(METRICS) + b
            result.rows.append(
                {
                    "group": label,
                    "cases": n,
                    "model": m,
                    "metric": k,
                    "value": float(losses[m][k][sel].mean()),
                    "baseline_value": float(base[:, b].mean()),
                    "difference": float(mean_diff[j]),
                    "low": float(lo[j]),
                    "high": float(hi[j]),
                    "verdict": _verdict(lo[j], hi[j]),
                }
            )
    for b, k in enumerate(METRICS):
        values = {result.baseline: float(base[:, b].mean())}
        values.update({m: float(losses[m][k][sel].mean()) for m in models})
        winner = min(values, key=lambda name: values[name])
        result.best.append({"group": label, "metric": k, "model": winner, "value": values[winner]})


def _verdict(low: float, high: float) -> str:
    """A difference's verdict from its interval: wholly below zero, wholly above, or neither."""
    return "errs less" if high < 0 else "errs more" if low > 0 else "no clear difference"


def _tradeoffs(rows: list[dict[str, Any]], models: list[str]) -> list[dict[str, Any]]:
    """Each model and metric that errs clearly less for one group and clearly more for another."""
    tradeoffs = []
    for m in models:
        for k in METRICS:
            mine = [r for r in rows if r["model"] == m and r["metric"] == k]
            helped = [
                r["group"] for r in mine if r["group"] != "all" and r["verdict"] == "errs less"
            ]
            hurt = [r["group"] for r in mine if r["group"] != "all" and r["verdict"] == "errs more"]
            if helped and hurt:
                tradeoffs.append({"model": m, "metric": k, "helps": helped, "hurts": hurt})
    return tradeoffs
