"""Similar cases: the k nearest history cases in the non-group features, with their outcomes.

Distance is Euclidean over the design's non-group columns: numeric features are already
standardised with the history mean and standard deviation; each categorical one-hot column is
scaled by 1/√2, so that two different categories are 1 apart — the same as one standard
deviation of a numeric feature. A missing-value indicator counts 1 when it differs. The group
attribute is left out on purpose: similar cases are similar whatever their group, and their
groups are shown next to their outcomes.

The search is exact and blockwise: distances from a block of queries to a block of history
cases at a time, keeping a running k-best (``np.argpartition``), so memory stays bounded for a
history of any size and no Python loop runs over the cases. A case is never its own neighbour.

References
----------
Dwork, Hardt, Pitassi, Reingold, Zemel, "Fairness through awareness", ITCS 2012 (treat similar
individuals similarly).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from closecall.suite.snapshot import Snapshot

QUERY_BLOCK = 256
HISTORY_BLOCK = 32_768


@dataclass
class Neighbours:
    """The k nearest history cases of some query cases."""

    rows: np.ndarray  # snapshot rows queried
    index: np.ndarray  # (n, k) history row indices, nearest first (-1 = none)
    distance: np.ndarray  # (n, k)


def similarity_weights(snap: Snapshot) -> np.ndarray:
    """Per design column: 0 for group columns, 1/√2 for one-hot columns, 1 otherwise."""
    weights: list[float] = []
    for f in snap.encoder.features:
        for _ in f.design_names():
            if f.is_group:
                weights.append(0.0)
            elif f.kind == "categorical":
                weights.append(1.0 / np.sqrt(2.0))
            else:  # standardised value, or its 0/1 missing indicator
                weights.append(1.0)
    return np.array(weights)


def nearest_history(
    snap: Snapshot,
    rows: np.ndarray,
    k: int = 5,
    among: np.ndarray | None = None,
) -> Neighbours:
    """The k nearest history cases of the given snapshot rows.

    Parameters
    ----------
    snap : the snapshot
    rows : snapshot rows (cases under review) to find neighbours for
    k : how many neighbours
    among : optional boolean mask over history rows to search in (e.g. one group)
    """
    rows = np.asarray(rows, dtype=np.int64)
    scale = similarity_weights(snap)
    cols = np.flatnonzero(scale > 0)
    scale = scale[cols]
    hist = snap.hist_X
    n_hist = len(snap.hist_y)
    candidates = np.arange(n_hist) if among is None else np.flatnonzero(among)
    # the same case appears in the history when cases are cross-fitted: exclude it
    self_row = rows if snap.cross_fitted else np.full(len(rows), -1)
    k_eff = min(k, len(candidates))
    best_d = np.full((len(rows), k_eff), np.inf)
    best_i = np.full((len(rows), k_eff), -1, dtype=np.int64)
    if k_eff == 0:
        return Neighbours(rows, best_i, best_d)
    for qs in range(0, len(rows), QUERY_BLOCK):
        q = slice(qs, qs + QUERY_BLOCK)
        Q = np.asarray(snap.X[rows[q]], dtype=float)[:, cols] * scale
        qq = (Q * Q).sum(axis=1)
        bd, bi = best_d[q], best_i[q]
        for hs in range(0, len(candidates), HISTORY_BLOCK):
            idx = candidates[hs : hs + HISTORY_BLOCK]
            Hb = np.asarray(hist[idx], dtype=float)[:, cols] * scale
            d2 = qq[:, None] + (Hb * Hb).sum(axis=1)[None, :] - 2.0 * Q @ Hb.T
            d2[idx[None, :] == self_row[q, None]] = np.inf
            all_d = np.hstack([bd, d2])
            all_i = np.hstack([bi, np.broadcast_to(idx, d2.shape)])
            keep = np.argpartition(all_d, k_eff - 1, axis=1)[:, :k_eff]
            bd = np.take_along_axis(all_d, keep, axis=1)
            bi = np.take_along_axis(all_i, keep, axis=1)
        order = np.argsort(bd, axis=1, kind="stable")
        best_d[q] = np.sqrt(np.maximum(np.take_along_axis(bd, order, axis=1), 0.0))
        best_i[q] = np.take_along_axis(bi, order, axis=1)
    best_i[~np.isfinite(best_d)] = -1
    return Neighbours(rows, best_i, best_d)


def neighbours_for_case(snap: Snapshot, row: int, k: int = 5) -> dict[str, Any]:
    """One case's k nearest history cases overall, and the favourable share among the k
    nearest within each group level."""
    nb = nearest_history(snap, np.array([row]), k)
    y = np.asarray(snap.hist_y)
    hg = np.asarray(snap.hist_group_codes)
    ids = np.asarray(snap.hist_ids)
    levels = snap.group_levels
    found = [int(j) for j in nb.index[0] if j >= 0]
    listing = [
        {
            "case_id": str(ids[j]),
            "group": levels[int(hg[j])],
            "outcome": "favourable" if y[j] == 1 else "unfavourable",
            "distance": float(d),
        }
        for j, d in zip(nb.index[0], nb.distance[0], strict=True)
        if j >= 0
    ]
    by_group: list[dict[str, Any]] = []
    for g, level in enumerate(levels):
        within = nearest_history(snap, np.array([row]), k, among=hg == g)
        idx = within.index[0][within.index[0] >= 0]
        by_group.append(
            {
                "group": level,
                "neighbours": len(idx),
                "favourable_share": float(y[idx].mean()) if len(idx) else None,
                "mean_distance": float(within.distance[0][: len(idx)].mean()) if len(idx) else None,
            }
        )
    return {
        "k": k,
        "neighbours": listing,
        "favourable_share": float(y[found].mean()) if found else None,
        "by_group": by_group,
    }
