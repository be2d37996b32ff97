"""The close-call queue: which cases to review first.

A case is a *close call* when its margin under the reference model and the operative (first)
cost lens lies within the review band of zero, or when any model of the suite or any cost lens
decides it differently (a *flip*). The queue lists close calls with flips first, then by
closeness (|margin|); other orders and filters are available. All of it is vectorised: one
argsort over all cases.

Two orders and filters come from the analysis (docs/methods.md):

- ``ambiguity``: the reach h/(h + |margin|) of the pooled model's equally-good band (h its
  half-width); above 0.5 the band straddles zero (``ambiguous_only`` keeps those cases);
- ``dependence``: the share of the pooled model's feature pull that comes from the group
  attribute and its proxies; ``rests_on`` keeps cases whose decision flips when the group
  (``"group"``) or the group and its proxies (``"proxies"``) are set to their history average.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.special import logit

from closecall.core.errors import Fix, UserError
from closecall.core.numbers import check_count, check_number
from closecall.core.vocabulary import decision_word, model_at_lens
from closecall.setup.config import EPSILON_MAX
from closecall.suite.snapshot import Snapshot

SORT_KEYS = ("closeness", "margin", "ambiguity", "dependence", "id")
RESTS_ON = ("group", "proxies")

# Extra per-case measures registered by analysis modules:
# name -> function(snapshot, options) -> (n,) float array, larger = more urgent.
# options may hold "config" (the StudyConfig), "epsilon" (relative ε) and "model".
# The analysis modules load on first use, so listing cases stays quick to start.


def _ambiguity(snap: Snapshot, options: dict[str, Any]) -> np.ndarray:
    from closecall.analysis.multiplicity import ambiguity_measure

    return ambiguity_measure(snap, options)


def _dependence(snap: Snapshot, options: dict[str, Any]) -> np.ndarray:
    from closecall.analysis.dependence import dependence_share

    return dependence_share(snap, options)


MEASURES: dict[str, Callable[[Snapshot, dict[str, Any]], np.ndarray]] = {
    "ambiguity": _ambiguity,
    "dependence": _dependence,
}


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

    @property
    def flip(self) -> np.ndarray:
        return np.asarray(self.differs.any(axis=1))


def decision_grid(snap: Snapshot) -> DecisionGrid:
    """Decisions of every (model, lens) pair; the reference is (reference model, first lens)."""
    pairs: list[tuple[str, str]] = []
    cols: list[np.ndarray] = []
    for model in snap.model_names:
        lg = np.asarray(snap.logit(model))
        for lens in snap.lenses:
            pairs.append((model, lens.name))
            cols.append(lg > float(logit(lens.threshold)))
    ref = pairs.index((snap.reference, snap.lenses[0].name))
    return DecisionGrid(pairs, np.column_stack(cols), ref)


@dataclass
class Queue:
    """An ordered selection of cases (row numbers into the snapshot) and what ranks them."""

    snapshot_id: str
    order: np.ndarray  # snapshot rows, in display order
    margin: np.ndarray  # reference margin, all cases
    grid: DecisionGrid
    band: float
    sort: str
    counts: dict[str, int] = field(default_factory=dict)
    measures: dict[str, np.ndarray] = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.order)


def build_queue(
    snap: Snapshot,
    *,
    band: float,
    group: str | None = None,
    flips_only: bool = False,
    close_only: bool = True,
    sort: str = "closeness",
    id_prefix: str | None = None,
    options: dict[str, Any] | None = None,
    exclude_rows: np.ndarray | None = None,
    ambiguous_only: bool = False,
    rests_on_part: str | None = None,
) -> Queue:
    """Rank and filter the cases of a snapshot.

    Parameters
    ----------
    band : close calls have |reference margin| <= band (log-odds)
    group : keep one group level
    flips_only : keep cases that some model or lens decides differently
    close_only : keep close calls only (False: every case)
    sort : one of SORT_KEYS
    id_prefix : keep ids starting with this text
    exclude_rows : boolean mask of rows to drop (e.g. already reviewed)
    options : for the analysis measures: "config", "epsilon" (relative ε), "model"
    ambiguous_only : keep cases whose equally-good band straddles zero
    rests_on_part : "group" or "proxies": keep cases whose decision flips when that part
        (the group; the group and its proxies) is neutralised
    """
    if sort not in SORT_KEYS:
        raise UserError(f"unknown sort key '{sort}'", Fix("sort", allowed=tuple(SORT_KEYS)))
    check_queue_numbers(band, (options or {}).get("epsilon"))
    if rests_on_part is not None and rests_on_part not in RESTS_ON:
        raise UserError(
            f"unknown part '{rests_on_part}'",
            Fix("rests_on", allowed=tuple(RESTS_ON)),
            about="rests_on",
        )
    options = options or {}
    margin = np.asarray(snap.margins(snap.reference))
    grid = decision_grid(snap)
    flip = grid.flip
    close = np.abs(margin) <= band
    keep = np.ones(snap.n_cases, dtype=bool)
    if close_only:
        keep &= close | flip
    if flips_only:
        keep &= flip
    if group is not None:
        if group not in snap.group_levels:
            raise UserError(
                f"no group level '{group}'", f"choose one of: {', '.join(snap.group_levels)}"
            )
        keep &= snap.group_codes == snap.group_levels.index(group)
    if id_prefix:
        keep &= np.char.startswith(np.asarray(snap.case_ids), id_prefix)
    if exclude_rows is not None:
        keep &= ~exclude_rows
    measures: dict[str, np.ndarray] = {}
    if ambiguous_only:
        from closecall.analysis.multiplicity import ambiguous_cases

        keep &= ambiguous_cases(snap, options)
        measures["ambiguity"] = MEASURES["ambiguity"](snap, options)
    if rests_on_part is not None:
        from closecall.analysis.dependence import rests_on

        keep &= rests_on(snap, rests_on_part, options.get("model", "pooled"))
        measures["dependence"] = MEASURES["dependence"](snap, options)
    rows = np.flatnonzero(keep)
    if sort in ("ambiguity", "dependence"):
        if sort not in measures:
            measures[sort] = MEASURES[sort](snap, options)
        key = measures[sort][rows]
        order = rows[np.lexsort((np.abs(margin[rows]), -key))]
    elif sort == "margin":
        order = rows[np.argsort(np.abs(margin[rows]), kind="stable")]
    elif sort == "id":
        order = rows[np.argsort(np.asarray(snap.case_ids)[rows], kind="stable")]
    else:  # closeness: flips first, then by |margin|
        order = rows[np.lexsort((np.abs(margin[rows]), ~flip[rows]))]
    counts = {
        "cases": int(snap.n_cases),
        "close_calls": int((close | flip).sum()),
        "within_band": int(close.sum()),
        "flips": int(flip.sum()),
        "listed": len(order),
    }
    return Queue(snap.id, order, margin, grid, band, sort, counts, measures)


def check_queue_numbers(band: object, epsilon: object = None) -> None:
    """Refuse a review band or relative ε that is NaN, infinite or out of range.

    The band is |margin| in log-odds (≥ 0; 0 lists the flips only); ε is the equally-good set's
    slack, the range of ``[multiplicity] epsilon`` (docs/config.md).
    """
    check_number("band", band, 0, example="0.5")
    if epsilon is not None:
        check_number("epsilon", epsilon, 0, EPSILON_MAX, low_open=True, example="0.002")


def queue_rows(
    snap: Snapshot, q: Queue, start: int = 0, stop: int | None = None
) -> list[dict[str, Any]]:
    """Plain rows for display or JSON, for queue positions [start, stop)."""
    check_count("the first position", start, 0)
    if stop is not None:
        check_count("limit", stop, start, example="20")
    rows = q.order[start:stop]
    first = snap.lenses[0].name
    labels = snap.group_labels
    ids = snap.case_ids
    t0 = float(logit(snap.lenses[0].threshold))
    logits = {m: np.asarray(snap.logit(m)) for m in snap.model_names}
    differs = q.grid.differs
    out: list[dict[str, Any]] = []
    for rank, r in enumerate(rows, start=start + 1):
        margins = {m: float(logits[m][r] - t0) for m in snap.model_names}
        diff = [
            model_at_lens(m, lens)
            for (m, lens), d in zip(q.grid.pairs, differs[r], strict=True)
            if d
        ]
        row: dict[str, Any] = {
            "rank": rank,
            "case_id": str(ids[r]),
            "group": str(labels[r]),
            "margin": float(q.margin[r]),
            "decision": decision_word(bool(q.margin[r] > 0)),
            "flip": bool(diff),
            "differs": diff,
            "margins": margins,
            "decisions": {m: decision_word(v > 0) for m, v in margins.items()},
            "lens": first,
        }
        for name, values in q.measures.items():
            row[name] = float(values[r])
        out.append(row)
    return out
