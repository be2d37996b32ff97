"""Override rate against margin, per group: the data behind the margin picture."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from closecall.reports.disparity.intervals import proportion, wilson_interval
from closecall.reports.disparity.table import check_reviews, group_order


@dataclass(frozen=True)
class MarginBin:
    """Overrides among a group's decided reviews whose margin falls in [low, high)."""

    group: str
    margin_low: float
    margin_high: float
    decided: int
    overridden: int
    rate: float
    low: float
    high: float


def override_by_margin(
    reviews: pd.DataFrame, *, bins: int = 8, level: float = 0.95
) -> tuple[MarginBin, ...]:
    """Override rate per group in equal-width margin bins spanning the reviewed margins."""
    df = check_reviews(reviews)
    d = df[df["decided"]]
    groups = group_order(df)
    m = d["margin"].to_numpy(dtype=float)
    lo, hi = float(m.min()), float(m.max())
    if hi <= lo:
        hi = lo + 1e-9
    edges = np.linspace(lo, hi, bins + 1)
    idx = np.clip(np.digitize(m, edges[1:-1]), 0, bins - 1)
    table = (
        pd.DataFrame({"group": d["group"].to_numpy(), "bin": idx, "ov": d["overridden"]})
        .groupby(["group", "bin"])["ov"]
        .agg(["size", "sum"])
    )
    full = pd.MultiIndex.from_product([groups, range(bins)], names=["group", "bin"])
    table = table.reindex(full, fill_value=0)
    n = table["size"].to_numpy()
    k = table["sum"].to_numpy()
    rate = proportion(k, n)
    wl, wh = wilson_interval(k, n, level)
    return tuple(
        MarginBin(
            group=str(g),
            margin_low=float(edges[b]),
            margin_high=float(edges[b + 1]),
            decided=int(n[i]),
            overridden=int(k[i]),
            rate=float(rate[i]),
            low=float(wl[i]),
            high=float(wh[i]),
        )
        for i, (g, b) in enumerate(table.index)
        if n[i] > 0
    )
