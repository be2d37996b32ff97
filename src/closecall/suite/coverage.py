"""Pending cases outside what the history covers: a numeric feature beyond the history's range.

A model's margin for such a case extrapolates a straight line past the data it was fitted on:
the number is still computed, but nothing in the history vouches for it. ``fit`` reports each
feature with the count and share of pending cases affected (in the snapshot's notes).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from closecall.setup.load import StudyData


def outside_history(data: StudyData) -> list[dict[str, Any]]:
    """Per numeric feature, the pending cases below the history's minimum or above its maximum.

    Returns ``{"feature", "below", "above", "cases", "share", "history_min", "history_max"}``
    for each feature with at least one such case (missing values are not counted); empty
    without a pending file. One vectorised pass per feature.
    """
    if data.pending is None or len(data.pending) == 0:
        return []
    out: list[dict[str, Any]] = []
    n = len(data.pending)
    for feature in data.features:
        if feature.kind != "numeric":
            continue
        hist = pd.to_numeric(data.history[feature.name], errors="coerce").to_numpy(dtype=float)
        pend = pd.to_numeric(data.pending[feature.name], errors="coerce").to_numpy(dtype=float)
        if not np.isfinite(hist).any():
            continue
        lo, hi = float(np.nanmin(hist)), float(np.nanmax(hist))
        below = int(np.count_nonzero(pend < lo))
        above = int(np.count_nonzero(pend > hi))
        if below + above:
            out.append(
                {
                    "feature": feature.name,
                    "below": below,
                    "above": above,
                    "cases": below + above,
                    "share": (below + above) / n,
                    "history_min": lo,
                    "history_max": hi,
                }
            )
    return out


def outside_history_notes(warnings: list[dict[str, Any]]) -> list[str]:
    """One sentence per feature for the snapshot's notes and ``closecall fit``."""
    return [
        f"{w['cases']:,} pending case(s) ({w['share']:.1%}) have {w['feature']} outside the "
        f"history's range {w['history_min']:g} to {w['history_max']:g} ({w['below']:,} below, "
        f"{w['above']:,} above): their margins extrapolate past the data the models were "
        "fitted on"
        for w in warnings
    ]
