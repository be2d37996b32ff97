"""Triage: which close calls a supervisor should review first, and why, in words.

Three kinds of disagreement are told apart (all against the reference model under the
operative, first, cost lens):

- **model flip**: another fitted model of the suite decides the case differently under the
  operative lens (a different, equally defensible model would decide otherwise);
- **lens flip**: only another cost lens decides differently (a question of costs, not of
  the model);
- **uncertain**: the band of equally good models straddles the threshold (ambiguous).

The triage priority (the default order this module gives; ``queue.py``'s query can sort by it)
puts first the cases whose decision **rests on the group or its proxies** (neutralising them
flips it), then **model flips**, then **uncertain** cases, then **lens flips**, then the other
close calls; within a tier, nearest the threshold first. Vectorised: one lexsort.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from closecall.review.queue import DecisionGrid

#: Tiers in priority order, with the reason shown per row.
TIERS = ("rests on group", "model flip", "uncertain", "lens flip", "close to threshold")
TIER_REASONS = (
    "decision flips without the group attribute or its proxies",
    "another model decides differently",
    "equally good models straddle the threshold",
    "only another cost lens decides differently",
    "near the threshold",
)


@dataclass(frozen=True)
class FlipKinds:
    """(n,) boolean arrays: model flips, lens-only flips."""

    model: np.ndarray
    lens: np.ndarray


def flip_kinds(grid: DecisionGrid, reference: str, operative_lens: str) -> FlipKinds:
    """Split the grid's flips into model flips and lens-only flips.

    A model flip: some other model under ``operative_lens`` decides differently from the
    reference. A lens flip: the case flips, but only through another lens.
    """
    differs = grid.differs
    other_model = np.array(
        [m != reference and lens == operative_lens for m, lens in grid.pairs], dtype=bool
    )
    model = (
        np.asarray(differs[:, other_model].any(axis=1))
        if other_model.any()
        else (np.zeros(differs.shape[0], dtype=bool))
    )
    lens = np.asarray(differs.any(axis=1)) & ~model
    return FlipKinds(model, lens)


def triage_tiers(
    kinds: FlipKinds, rests_on: np.ndarray | None, uncertain: np.ndarray | None
) -> np.ndarray:
    """(n,) int8 tier per case (index into TIERS); a case takes its most urgent tier."""
    n = len(kinds.model)
    tier = np.full(n, len(TIERS) - 1, dtype=np.int8)
    tier[kinds.lens] = 3
    if uncertain is not None:
        tier[np.asarray(uncertain, dtype=bool) & (tier > 2)] = 2
    tier[kinds.model & (tier > 1)] = 1
    if rests_on is not None:
        tier[np.asarray(rests_on, dtype=bool)] = 0
    return tier


def triage_order(rows: np.ndarray, tier: np.ndarray, margin: np.ndarray) -> np.ndarray:
    """``rows`` in triage order: by tier, then nearest the threshold, then row (stable)."""
    return rows[np.lexsort((rows, np.abs(margin[rows]), tier[rows]))]


def tier_counts(tier: np.ndarray, rows: np.ndarray) -> dict[str, int]:
    """How many of ``rows`` fall in each tier (for headers and docs)."""
    counts = np.bincount(tier[rows], minlength=len(TIERS))
    return {name: int(c) for name, c in zip(TIERS, counts, strict=True)}
