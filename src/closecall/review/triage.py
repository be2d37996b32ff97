"""Triage: which close calls a supervisor should review first, and why, in words.

Three kinds of disagreement are told apart (all against the reference model under the
operative, first, cost lens):

- **model flip**: another fitted model of the suite decides the case differently under the
  operative lens (a different, equally defensible model would decide otherwise);
- **lens flip**: only another cost lens decides differently (a question of costs, not of
  the model);
- **ambiguous**: the band of equally good models straddles the threshold (an equally good
  model would decide the other way: the decision is uncertain).

The triage priority — the default order of the queue — puts first the cases whose decision
**rests on the group or its proxies** (neutralising them flips it), then **model flips**, then
**ambiguous** cases, then **lens flips**, then the other close calls (**near the threshold**);
within a tier, nearest the threshold first. Vectorised: one lexsort.

Distances from the threshold are also put in words, with cut-points taken from the review
band b (docs/tui.md): |margin| ≤ b/4 *on the line*; ≤ b *just above/below*; ≤ 2b
*above/below*; beyond, *well above/below* (above = the favourable side).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Tiers in priority order (names used in headers, --json and docs).
TIERS = ("rests on group", "model flip", "ambiguous", "lens flip", "near threshold")
#: One key per tier for counts (``tier_<key>``) and JSON.
TIER_KEYS = ("rests_on", "model_flip", "ambiguous", "lens_flip", "near_threshold")
#: The reason shown per row, in words (at most 14 cells: the list's "why first" column).
TIER_WORDS = ("rests on group", "model differs", "ambiguous", "lens differs", "near threshold")
#: The same reason in full (help, docs, ``closecall queue --json``).
TIER_REASONS = (
    "the decision flips without the group attribute or its proxies",
    "another fitted model decides differently under the operative lens",
    "equally good models fall on both sides of the threshold",
    "only another cost lens decides differently",
    "near the threshold; every model and lens agrees",
)
#: The row word of a rests-on case whose decision flips only once the proxies go too.
PROXIES_WORD = "rests on proxy"

#: Distances in words, by code (see :func:`closeness_codes`).
CLOSENESS_WORDS = (
    "well below",
    "below",
    "just below",
    "on the line",
    "just above",
    "above",
    "well above",
)


@dataclass
class DecisionGrid:
    """Every model's decision under every lens, for all cases."""

    pairs: list[tuple[str, str]]  # (model, lens) per column
    favourable: np.ndarray  # (n, len(pairs)) bool
    reference_col: int

    @property
    def reference(self) -> np.ndarray:
        return self.favourable[:, self.reference_col]

    @property
    def differs(self) -> np.ndarray:
        """(n, pairs) True where a model/lens decides differently from the reference."""
        diff: np.ndarray = self.favourable != self.reference[:, None]
        return diff

    def differs_at(self, rows: np.ndarray | int) -> np.ndarray:
        """:attr:`differs` for some rows only (an int: one row's (pairs,) vector)."""
        fav = self.favourable[rows]
        diff: np.ndarray = fav != fav[..., self.reference_col, None]
        return diff

    @property
    def flip(self) -> np.ndarray:
        return np.asarray(self.differs.any(axis=1))

    def kinds(self) -> FlipKinds:
        """Model flips and lens-only flips (against the reference model and first lens)."""
        model, lens = self.pairs[self.reference_col]
        return flip_kinds(self, model, lens)


@dataclass(frozen=True)
class TriageInputs:
    """The analysis filters the tiers read, each (n,) bool or None when it does not apply."""

    rests_group: np.ndarray | None = None  # flips when the group is set to its average
    rests_proxies: np.ndarray | None = None  # flips when the group and its proxies are
    ambiguous: np.ndarray | None = None  # the equally-good band straddles the threshold

    @property
    def rests_on(self) -> np.ndarray | None:
        """Rests on the group or its proxies (either filter), None when neither applies."""
        parts = [np.asarray(m, dtype=bool) for m in (self.rests_group, self.rests_proxies)
                 if m is not None]  # fmt: skip
        if not parts:
            return None
        return np.asarray(np.logical_or.reduce(parts))


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
    fav = grid.favourable
    ref = fav[:, grid.reference_col]
    model = np.zeros(len(ref), dtype=bool)
    other = np.zeros(len(ref), dtype=bool)
    for j, (m, lens) in enumerate(grid.pairs):  # one pass per model × lens pair, not per case
        if j == grid.reference_col:
            continue
        target = model if m != reference and lens == operative_lens else other
        target |= fav[:, j] != ref
    return FlipKinds(model, other & ~model)


def triage_tiers(
    kinds: FlipKinds, rests_on: np.ndarray | None, ambiguous: np.ndarray | None
) -> np.ndarray:
    """(n,) int8 tier per case (index into TIERS); a case takes its most urgent tier.

    ``rests_on`` and ``ambiguous`` may be None when the analysis does not apply (then no case
    takes that tier).
    """
    n = len(kinds.model)
    tier = np.full(n, len(TIERS) - 1, dtype=np.int8)
    tier[kinds.lens] = 3
    if ambiguous is not None:
        tier[np.asarray(ambiguous, dtype=bool) & (tier > 2)] = 2
    tier[kinds.model & (tier > 1)] = 1
    if rests_on is not None:
        tier[np.asarray(rests_on, dtype=bool)] = 0
    return tier


def triage_order(rows: np.ndarray, tier: np.ndarray, margin: np.ndarray) -> np.ndarray:
    """``rows`` in triage order: by tier, then nearest the threshold, then row (stable)."""
    return rows[np.lexsort((rows, np.abs(margin[rows]), tier[rows]))]


def tier_counts(tier: np.ndarray, rows: np.ndarray) -> dict[str, int]:
    """How many of ``rows`` fall in each tier, by tier name (for headers and docs)."""
    counts = np.bincount(tier[rows], minlength=len(TIERS))
    return {name: int(c) for name, c in zip(TIERS, counts, strict=True)}


def closeness_codes(margin: np.ndarray, band: float) -> np.ndarray:
    """(n,) int8 index into :data:`CLOSENESS_WORDS` for each margin (log-odds).

    Cut-points from the review band ``band``: |m| ≤ band/4 on the line, ≤ band just
    above/below, ≤ 2·band above/below, beyond that well above/below.

    Examples
    --------
    >>> [CLOSENESS_WORDS[c] for c in closeness_codes(np.array([0.0, -0.3, 0.9, 2.0]), 0.5)]
    ['on the line', 'just below', 'above', 'well above']
    """
    m = np.asarray(margin, dtype=float)
    a = np.abs(m)
    step = np.select([a <= band / 4, a <= band, a <= 2 * band], [0, 1, 2], default=3)
    return np.where(a <= band / 4, 3, 3 + np.sign(m) * step).astype(np.int8)
