"""Where each group's cases sit near the threshold: reference margins counted in equal bins.

The engine side of the review screen's margin chart and of `closecall queue --chart`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from closecall.suite.snapshot import Snapshot


@dataclass(frozen=True)
class MarginDistribution:
    """Counts of reference margins per group in equal bins over [−span, +span]."""

    levels: list[str]
    counts: np.ndarray  # (groups, bins)
    span: float
    band: float
    within_band: np.ndarray  # (groups,) cases with |margin| <= band
    totals: np.ndarray  # (groups,) all cases of the group

    @property
    def edges(self) -> np.ndarray:
        return np.linspace(-self.span, self.span, self.counts.shape[1] + 1)

    def to_json(self) -> dict[str, Any]:
        return {
            "span": self.span,
            "band": self.band,
            "edges": self.edges.tolist(),
            "groups": [
                {
                    "group": level,
                    "counts": self.counts[g].tolist(),
                    "within_band": int(self.within_band[g]),
                    "cases": int(self.totals[g]),
                }
                for g, level in enumerate(self.levels)
            ],
        }


def margin_distribution(snap: Snapshot, band: float, bins: int) -> MarginDistribution:
    """Reference margins per group in ``bins`` equal bins over ±3 bands (±1.5 with no band)."""
    span = 3 * band if band > 0 else 1.5
    margin = np.asarray(snap.margins(snap.reference))
    codes = np.asarray(snap.group_codes)
    levels = snap.group_levels
    edges = np.linspace(-span, span, bins + 1)
    inside = np.abs(margin) <= span
    idx = np.clip(np.searchsorted(edges, margin[inside], side="right") - 1, 0, bins - 1)
    flat = codes[inside].astype(np.int64) * bins + idx
    counts = np.bincount(flat, minlength=len(levels) * bins).reshape(len(levels), bins)
    within = np.bincount(codes[np.abs(margin) <= band], minlength=len(levels))
    totals = np.bincount(codes, minlength=len(levels))
    return MarginDistribution(levels, counts, span, band, within, totals)
