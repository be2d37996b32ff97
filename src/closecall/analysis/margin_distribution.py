"""Where each group's cases sit near the threshold: reference margins counted in equal bins.

The engine side of the review screen's margin chart and of `closecall queue --chart`. Under a
list's filters the chart counts the cases the filters keep, at any distance from the threshold
(:func:`kept_rows`): its "within the band" count is then the list's own, and with no filter it is
the whole study.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

import numpy as np

from closecall.suite.snapshot import Snapshot

if TYPE_CHECKING:
    from closecall.review.query import QueueQuery
    from closecall.suite.opening import OpenedStudy


@dataclass(frozen=True)
class MarginDistribution:
    """Counts of reference margins per group in equal bins over [−span, +span].

    ``filtered`` is True when the counts are of the cases a list's filters keep (every case of
    the study otherwise); ``totals`` are then the kept cases of each group.
    """

    levels: list[str]
    counts: np.ndarray  # (groups, bins)
    span: float
    band: float
    within_band: np.ndarray  # (groups,) counted cases with |margin| <= band
    totals: np.ndarray  # (groups,) counted cases of the group
    filtered: bool = False

    @property
    def edges(self) -> np.ndarray:
        return np.linspace(-self.span, self.span, self.counts.shape[1] + 1)

    def to_json(self) -> dict[str, Any]:
        return {
            "span": self.span,
            "band": self.band,
            "edges": self.edges.tolist(),
            "counted": "kept by the filters" if self.filtered else "every case",
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


def margin_distribution(
    snap: Snapshot, band: float, bins: int, rows: np.ndarray | None = None
) -> MarginDistribution:
    """Reference margins per group in ``bins`` equal bins over ±3 bands (±1.5 with no band).

    Parameters
    ----------
    snap, band, bins
        The snapshot, the review band (log-odds) and how many bins.
    rows
        The snapshot rows to count (e.g. :func:`kept_rows`); None: every case.
    """
    span = 3 * band if band > 0 else 1.5
    margin = np.asarray(snap.margins(snap.reference))
    codes = np.asarray(snap.group_codes)
    if rows is not None:
        margin, codes = margin[rows], codes[rows]
    levels = snap.group_levels
    edges = np.linspace(-span, span, bins + 1)
    inside = np.abs(margin) <= span
    idx = np.clip(np.searchsorted(edges, margin[inside], side="right") - 1, 0, bins - 1)
    flat = codes[inside].astype(np.int64) * bins + idx
    counts = np.bincount(flat, minlength=len(levels) * bins).reshape(len(levels), bins)
    within = np.bincount(codes[np.abs(margin) <= band], minlength=len(levels))
    totals = np.bincount(codes, minlength=len(levels))
    return MarginDistribution(levels, counts, span, band, within, totals, rows is not None)


def kept_rows(
    study: OpenedStudy,
    query: QueueQuery,
    *,
    reviews: tuple[np.ndarray, dict[str, list[str]]] | None = None,
    cache: Mapping[str, np.ndarray] | None = None,
) -> np.ndarray | None:
    """Snapshot rows a queue request's filters keep, at any distance from the threshold.

    The close-call rule and the limit aside, so the chart shows where the filtered cases lie
    on both sides of the band; None when the request has no filter (every case counts).
    ``reviews`` and ``cache`` are passed to :func:`closecall.review.query.answer_queue`.
    """
    from closecall.review.query import answer_queue

    filters = (query.group, query.flips, query.rests_on, query.id_prefix, query.changed_by)
    if all(f is None or f == "" for f in filters) and not (query.ambiguous or query.unreviewed):
        return None
    wide = replace(query, all_cases=True, limit=None, sort="margin")
    return answer_queue(study, wide, reviews=reviews, cache=cache).queue.order
