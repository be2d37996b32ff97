"""The close-call queue: which cases to review first.

A case is a *close call* when its margin under the reference model and the operative (first)
cost lens lies within the review band of zero, or when any model of the suite or any cost lens
decides it differently (a *flip*: a *model flip* when another model decides otherwise under
the operative lens, a *lens flip* when only another lens does). The queue lists close calls in
triage order (:mod:`closecall.review.triage`: rests on the group or its proxies, model flips,
ambiguous, lens flips, near the threshold; nearest the threshold first within each); other
orders and filters are available. All of it is vectorised: one lexsort over all cases.

Counts describe the cases the filters keep (``listed``), except ``cases`` and ``close_calls``,
which are the study's.

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

from closecall.core.errors import Fix, UserError
from closecall.core.numbers import check_count, check_number, logit
from closecall.core.vocabulary import decision_word, model_at_lens, short_model
from closecall.review.triage import (
    CLOSENESS_WORDS,
    PROXIES_WORD,
    TIER_KEYS,
    TIER_REASONS,
    TIER_WORDS,
    TIERS,
    DecisionGrid,
    FlipKinds,
    TriageInputs,
    closeness_codes,
    flip_kinds,
    triage_order,
    triage_tiers,
)
from closecall.setup.config import EPSILON_MAX
from closecall.suite.snapshot import Snapshot

#: Orders: triage (the default), closeness (flips first, then |margin|), |margin|, two analysis
#: measures (largest first), case id.
SORT_KEYS = ("triage", "closeness", "margin", "ambiguity", "dependence", "id")
#: Which flips the flips filter keeps: any, model flips, lens-only flips.
FLIP_KINDS = ("any", "model", "lens")
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
    tier: np.ndarray | None = None  # (n,) int8 triage tier of every case (index into TIERS)
    rests_group: np.ndarray | None = None  # (n,) bool: flips without the group alone
    same_as: dict[str, str] = field(default_factory=dict)  # model -> identical earlier model

    def __len__(self) -> int:
        return len(self.order)


def build_queue(
    snap: Snapshot,
    *,
    band: float,
    group: str | None = None,
    flips_only: bool | str = False,
    close_only: bool = True,
    sort: str = "closeness",
    id_prefix: str | None = None,
    options: dict[str, Any] | None = None,
    exclude_rows: np.ndarray | None = None,
    ambiguous_only: bool = False,
    rests_on_part: str | None = None,
    triage: TriageInputs | None = None,
) -> Queue:
    """Rank and filter the cases of a snapshot.

    Parameters
    ----------
    band : close calls have |reference margin| <= band (log-odds)
    group : keep one group level
    flips_only : keep cases that some model or lens decides differently (True or "any"),
        model flips only ("model") or lens-only flips ("lens")
    close_only : keep close calls only (False: every case)
    sort : one of SORT_KEYS
    id_prefix : keep ids starting with this text
    exclude_rows : boolean mask of rows to drop (e.g. already reviewed)
    options : for the analysis measures: "config", "epsilon" (relative ε), "model"
    ambiguous_only : keep cases whose equally-good band straddles zero
    rests_on_part : "group" or "proxies": keep cases whose decision flips when that part
        (the group; the group and its proxies) is neutralised
    triage : the analysis filters the triage tiers read (rests on the group, on the group and
        its proxies, ambiguous); None: the tiers use the flips only
    """
    _check_request(sort, band, options, rests_on_part)
    options = options or {}
    flip_kind = _flip_kind(flips_only)
    margin = np.asarray(snap.margins(snap.reference))
    grid = decision_grid(snap)
    kinds = flip_kinds(grid, snap.reference, snap.lenses[0].name)
    flip = kinds.model | kinds.lens
    close = np.abs(margin) <= band
    keep = np.ones(snap.n_cases, dtype=bool)
    if close_only:
        keep &= close | flip
    if flip_kind is not None:
        keep &= {"any": flip, "model": kinds.model, "lens": kinds.lens}[flip_kind]
    keep &= _case_filter(snap, group, id_prefix, exclude_rows)
    measures = _analysis_filter(snap, keep, ambiguous_only, rests_on_part, options)
    rows = np.flatnonzero(keep)
    triage = triage or TriageInputs()
    tier = triage_tiers(kinds, triage.rests_on, triage.ambiguous)
    order = _ordered(snap, rows, sort, measures, options, margin, flip, tier)
    counts = {
        "cases": int(snap.n_cases),
        "close_calls": int((close | flip).sum()),
        **listed_counts(order, close, kinds, tier),
    }
    return Queue(
        snap.id, order, margin, grid, band, sort, counts, measures, tier, triage.rests_group,
        identical_models(snap),
    )  # fmt: skip


def _check_request(
    sort: str, band: float, options: dict[str, Any] | None, rests_on_part: str | None
) -> None:
    """Refuse an unknown sort key or part, or a band or ε the queue cannot use."""
    if sort not in SORT_KEYS:
        raise UserError(f"unknown sort key '{sort}'", Fix("sort", allowed=tuple(SORT_KEYS)))
    check_queue_numbers(band, (options or {}).get("epsilon"))
    if rests_on_part is not None and rests_on_part not in RESTS_ON:
        raise UserError(
            f"unknown part '{rests_on_part}'",
            Fix("rests_on", allowed=tuple(RESTS_ON)),
            about="rests_on",
        )


def _case_filter(
    snap: Snapshot, group: str | None, id_prefix: str | None, exclude_rows: np.ndarray | None
) -> np.ndarray:
    """Boolean mask of the cases of one group level, with an id prefix, not excluded."""
    keep = np.ones(snap.n_cases, dtype=bool)
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
    return keep


def _analysis_filter(
    snap: Snapshot,
    keep: np.ndarray,
    ambiguous_only: bool,
    rests_on_part: str | None,
    options: dict[str, Any],
) -> dict[str, np.ndarray]:
    """Narrow ``keep`` in place to ambiguous cases or those resting on a part; their measures."""
    measures: dict[str, np.ndarray] = {}
    if ambiguous_only:
        from closecall.analysis.multiplicity import ambiguous_cases

        keep &= ambiguous_cases(snap, options)
        measures["ambiguity"] = MEASURES["ambiguity"](snap, options)
    if rests_on_part is not None:
        from closecall.analysis.dependence import rests_on

        keep &= rests_on(snap, rests_on_part, options.get("model", "pooled"))
        measures["dependence"] = MEASURES["dependence"](snap, options)
    return measures


def _ordered(
    snap: Snapshot,
    rows: np.ndarray,
    sort: str,
    measures: dict[str, np.ndarray],
    options: dict[str, Any],
    margin: np.ndarray,
    flip: np.ndarray,
    tier: np.ndarray,
) -> np.ndarray:
    """The kept rows in the order of ``sort`` (a measure it needs is added to ``measures``)."""
    if sort in ("ambiguity", "dependence"):
        if sort not in measures:
            measures[sort] = MEASURES[sort](snap, options)
        key = measures[sort][rows]
        return rows[np.lexsort((np.abs(margin[rows]), -key))]
    if sort == "margin":
        return rows[np.argsort(np.abs(margin[rows]), kind="stable")]
    if sort == "id":
        return rows[np.argsort(np.asarray(snap.case_ids)[rows], kind="stable")]
    if sort == "closeness":  # flips first, then by |margin|
        return rows[np.lexsort((np.abs(margin[rows]), ~flip[rows]))]
    return triage_order(rows, tier, margin)


def listed_counts(
    order: np.ndarray, close: np.ndarray, kinds: FlipKinds, tier: np.ndarray
) -> dict[str, int]:
    """Counts of the listed cases: within the band, flips by kind, and per triage tier."""
    per_tier = np.bincount(tier[order], minlength=len(TIERS))
    return {
        "listed": len(order),
        "within_band": int(np.count_nonzero(close[order])),
        "flips": int(np.count_nonzero(kinds.model[order] | kinds.lens[order])),
        "model_flips": int(np.count_nonzero(kinds.model[order])),
        "lens_flips": int(np.count_nonzero(kinds.lens[order])),
        **{f"tier_{key}": int(c) for key, c in zip(TIER_KEYS, per_tier, strict=True)},
    }


def _flip_kind(flips: bool | str | None) -> str | None:
    """The flips filter as one of FLIP_KINDS, or None when off (True means any flip)."""
    if flips is None or flips is False:
        return None
    if flips is True:
        return "any"
    if flips not in FLIP_KINDS:
        raise UserError(
            f"unknown kind of flip '{flips}'", Fix("flips", allowed=FLIP_KINDS), about="flips"
        )
    return str(flips)


def identical_models(snap: Snapshot) -> dict[str, str]:
    """Models that are another, earlier model of the suite: {later: earlier}.

    The proxy-free model is the unaware one when no proxy is flagged (it drops the same
    columns of the same data); any other pair counts when its fitted weights agree to within
    a millionth (solver tolerance). Such a model is named once in lists.
    """
    if snap.id in _SAME_AS:
        return dict(_SAME_AS[snap.id])
    out: dict[str, str] = {}
    names = list(snap.model_names)
    proxies = (snap.meta.get("proxies") or {}).get("proxies")
    if "proxy_free" in names and "unaware" in names and proxies == []:
        out["proxy_free"] = "unaware"
    fitted: list[tuple[str, np.ndarray, np.ndarray]] = []
    for name in names:
        if name in out:
            continue
        try:
            weights, row = snap.weights(name)
        except (KeyError, UserError):
            continue
        if weights.size == 0:  # imported scores: no weights
            continue
        for earlier, w, r in fitted:
            same_shape = w.shape == weights.shape and np.array_equal(r, row)
            if same_shape and np.allclose(w, weights, rtol=1e-6, atol=1e-8):
                out[name] = earlier
                break
        else:
            fitted.append((name, np.asarray(weights), np.asarray(row)))
    _SAME_AS[snap.id] = out
    return dict(out)


_SAME_AS: dict[str, dict[str, str]] = {}  # by snapshot id: a snapshot's models never change


def group_attribute(snap: Snapshot) -> str:
    """The group attribute's name (its columns joined with '/'), as headers show it."""
    columns = snap.meta.get("group_columns") or ["group"]
    return "/".join(str(c) for c in columns)


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
    differs = q.grid.differs_at(rows)  # only the rows shown: never the whole study
    ref_model, first_lens = q.grid.pairs[q.grid.reference_col]
    other = [m != ref_model and lens == first_lens for m, lens in q.grid.pairs]
    model_flip = np.asarray(differs[:, np.asarray(other, dtype=bool)].any(axis=1))
    tier = q.tier if q.tier is not None else np.full(snap.n_cases, len(TIERS) - 1, np.int8)
    near = closeness_codes(q.margin[rows], q.band)
    probability = 1.0 / (1.0 + np.exp(-logits[snap.reference][rows]))
    out: list[dict[str, Any]] = []
    for i, r in enumerate(rows):
        margins = {m: float(logits[m][r] - t0) for m in snap.model_names}
        diff = [
            model_at_lens(m, lens)
            for (m, lens), d in zip(q.grid.pairs, differs[i], strict=True)
            if d
        ]
        t = int(tier[r])
        row: dict[str, Any] = {
            "rank": start + 1 + i,
            "case_id": str(ids[r]),
            "group": str(labels[r]),
            "margin": float(q.margin[r]),
            "closeness": CLOSENESS_WORDS[int(near[i])],
            "probability": float(probability[i]),
            "decision": decision_word(bool(q.margin[r] > 0)),
            "tier": TIERS[t],
            "why": _row_word(q, t, r),
            "reason": TIER_REASONS[t],
            "flip": bool(diff),
            "flip_kind": "model" if model_flip[i] else "lens" if diff else None,
            "differs": diff,
            "others_differ": others_differ(q, differs[i]),
            "margins": margins,
            "decisions": {m: decision_word(v > 0) for m, v in margins.items()},
            "lens": first,
        }
        for name, values in q.measures.items():
            row[name] = float(values[r])
        out.append(row)
    return out


def _row_word(q: Queue, tier: int, row: int) -> str:
    """The short reason of one row ("rests on proxies" when the group alone does not flip it)."""
    if tier == 0 and q.rests_group is not None and not q.rests_group[row]:
        return PROXIES_WORD
    return TIER_WORDS[tier]


def others_differ(q: Queue, differs: np.ndarray) -> list[str]:
    """Who decides one case differently from the reference, in words, most telling first.

    The other models that differ under the operative lens (by their one name; a model
    identical to an earlier one is named once), then the cost lenses under which the reference
    model differs (``cautious lens``). Only when neither does, the other model@lens pairs
    (every pair is in the row's ``differs``).
    """
    ref_model, first = q.grid.pairs[q.grid.reference_col]
    models: list[str] = []
    lenses: list[str] = []
    pairs: list[str] = []
    for (model, lens), d in zip(q.grid.pairs, differs, strict=True):
        if not d or model in q.same_as:
            continue
        if lens == first:
            models.append(short_model(model))
        elif model == ref_model:
            lenses.append(f"{lens} lens")
        else:
            pairs.append(model_at_lens(short_model(model), lens))
    return models + lenses if models or lenses else pairs
