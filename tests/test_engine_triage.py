"""Triage: model flips, lens-only flips, uncertain cases, and the priority order."""

from __future__ import annotations

import numpy as np

from closecall.review.queue import DecisionGrid
from closecall.review.triage import TIERS, flip_kinds, tier_counts, triage_order, triage_tiers

PAIRS = [("pooled", "equal"), ("pooled", "cautious"), ("split", "equal"), ("split", "cautious")]


def _grid(rows: list[list[bool]]) -> DecisionGrid:
    return DecisionGrid(PAIRS, np.array(rows, dtype=bool), reference_col=0)


def test_model_and_lens_flips_are_told_apart() -> None:
    grid = _grid(
        [
            [True, True, True, True],  # everyone agrees
            [True, True, False, False],  # split decides otherwise: model flip
            [True, False, True, True],  # only the cautious lens differs: lens flip
            [True, True, True, False],  # split under the cautious lens only: lens flip
            [False, True, True, False],  # split differs under the operative lens: model flip
        ]
    )
    kinds = flip_kinds(grid, "pooled", "equal")
    assert kinds.model.tolist() == [False, True, False, False, True]
    assert kinds.lens.tolist() == [False, False, True, True, False]


def test_priority_rests_on_then_model_flip_then_uncertain_then_lens() -> None:
    grid = _grid(
        [
            [True, True, True, True],  # 0: nothing → close to threshold
            [True, True, False, False],  # 1: model flip
            [True, False, True, True],  # 2: lens flip
            [True, False, True, True],  # 3: lens flip and uncertain → uncertain
            [True, True, False, True],  # 4: model flip but rests on the group → rests on
            [True, True, True, True],  # 5: nothing, nearer the threshold than 0
        ]
    )
    kinds = flip_kinds(grid, "pooled", "equal")
    rests = np.array([0, 0, 0, 0, 1, 0], dtype=bool)
    uncertain = np.array([0, 0, 0, 1, 0, 0], dtype=bool)
    tier = triage_tiers(kinds, rests, uncertain)
    assert [TIERS[t] for t in tier] == [
        "near threshold",
        "model flip",
        "lens flip",
        "ambiguous",
        "rests on group",
        "near threshold",
    ]
    margin = np.array([0.4, 0.3, 0.1, 0.2, 0.45, -0.05])
    order = triage_order(np.arange(6), tier, margin)
    assert order.tolist() == [4, 1, 3, 2, 5, 0]
    counts = tier_counts(tier, np.arange(6))
    assert counts == {"rests on group": 1, "model flip": 1, "ambiguous": 1, "lens flip": 1,
                      "near threshold": 2}  # fmt: skip


def test_on_the_demo_every_flip_is_one_kind(demo_study) -> None:  # type: ignore[no-untyped-def]
    from closecall.review.queue import decision_grid

    snap = demo_study.snapshot
    grid = decision_grid(snap)
    kinds = flip_kinds(grid, snap.reference, snap.lenses[0].name)
    assert not (kinds.model & kinds.lens).any()
    np.testing.assert_array_equal(kinds.model | kinds.lens, grid.flip)
    # a lens-only flip: every model under the operative lens agrees with the reference
    first = [i for i, (_, lens) in enumerate(grid.pairs) if lens == snap.lenses[0].name]
    agree = (grid.favourable[:, first] == grid.reference[:, None]).all(axis=1)
    np.testing.assert_array_equal(kinds.lens, grid.flip & agree)
