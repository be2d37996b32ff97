"""Per-group slices of the cases, the way every per-group table walks them."""

from __future__ import annotations

from collections.abc import Iterator, Sequence

import numpy as np

ALL = "all"


def group_slices(codes: np.ndarray, levels: Sequence[str]) -> Iterator[tuple[int, str, np.ndarray]]:
    """(index, label, mask) for each group level, then (len(levels), "all", everything).

    Levels with no cases are skipped.
    """
    codes = np.asarray(codes)
    for gi, label in [*enumerate(levels), (len(levels), ALL)]:
        sel = np.ones(len(codes), dtype=bool) if gi == len(levels) else codes == gi
        if sel.any():
            yield gi, label, sel
