"""The deployed scorecard's own reasons for a case: points, margin, contributions, group part,
proxy part, neutralised margins, counterparts and similar cases.

A card is additive, so each feature's contribution is its points minus the history mean of
that feature's points (the interventional Shapley value of an additive model), divided by the
card's factor (points per unit of log-odds) to read in log-odds:

    margin_points = points − cutoff = baseline_points + Σ_j (p_ij − mean_j),
    baseline_points = intercept + Σ_j mean_j − cutoff,

and the margin in log-odds is margin_points / factor. Splitting the features into the group
attribute, its flagged proxies (the study's proxy detection) and the rest gives the group part,
proxy part and rest, as for the fitted models (closecall.analysis.dependence); neutralising sets
the group (and the proxies) at its history mean points. The card decides favourable iff
points ≥ cutoff.

Counterparts, for every other group level h: (a) *group swapped*: the group feature's points
become those the card gives level h; (b) *proxies carried*: also every proxy's points move to
the same within-group position in h's history, F_h⁻¹(F_g(p)) with F_g the mid-rank empirical
distribution of the proxy's points in the case's own group and F_h⁻¹ the inverse empirical
distribution function of group h (a value h's history actually has).

References
----------
Lundberg & Lee, "A unified approach to interpreting model predictions", NeurIPS 2017 (additive
models: the contribution of a feature is its term minus the term's mean).
Black, Yeom, Fredrikson, "FlipTest: fairness testing via optimal transport", FAT* 2020 (per
feature transport between groups).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from closecall.core.vocabulary import decision_word
from closecall.suite.scorecard import MISSING_LEVEL, OTHER_LEVEL, Scorecard
from closecall.suite.scorecard_study import HIST_POINTS, POINTS, card_meta
from closecall.suite.snapshot import Snapshot


@dataclass
class CardDependence:
    """The card's contributions for some snapshot rows (points; log-odds when scaled)."""

    card: Scorecard
    rows: np.ndarray
    features: list[str]
    roles: list[str]  # group | proxy | other
    points: np.ndarray  # (n, F) each feature's points
    mean_points: np.ndarray  # (F,) history mean of each feature's points
    total: np.ndarray  # (n,) the case's score

    @property
    def contributions_points(self) -> np.ndarray:
        return self.points - self.mean_points

    @property
    def margin_points(self) -> np.ndarray:
        return self.total - self.card.cutoff

    @property
    def baseline_points(self) -> float:
        return float(self.card.intercept + self.mean_points.sum() - self.card.cutoff)

    def part_points(self, role: str) -> np.ndarray:
        cols = [j for j, r in enumerate(self.roles) if r == role]
        return np.asarray(self.contributions_points[:, cols].sum(axis=1))


def card_of(snap: Snapshot) -> Scorecard | None:
    """The snapshot's card (scaled when its scale could be known), or None."""
    meta = card_meta(snap)
    return None if meta is None else Scorecard.from_json(meta["card"])


def card_dependence(snap: Snapshot, rows: np.ndarray) -> CardDependence | None:
    """The card's contributions for snapshot ``rows`` (vectorised), or None without a card."""
    meta = card_meta(snap)
    if meta is None:
        return None
    card = Scorecard.from_json(meta["card"])
    group_cols = set(snap.meta.get("group_columns", []))
    proxies = set(snap.proxies.proxies)
    roles = [
        "group" if f in group_cols else "proxy" if f in proxies else "other" for f in card.features
    ]
    P = np.asarray(snap.arrays[POINTS])[rows]
    return CardDependence(
        card=card,
        rows=np.asarray(rows),
        features=list(card.features),
        roles=roles,
        points=P,
        mean_points=np.asarray(meta["mean_points"], dtype=float),
        total=P.sum(axis=1) + card.intercept,
    )


def _level_points(card: Scorecard, feature: str, level: str) -> float:
    table = {r.level: r.points for r in card.rows_of(feature)}
    return float(table.get(level, table.get(OTHER_LEVEL, 0.0)))


def _history_points(snap: Snapshot) -> np.ndarray | None:
    """Each history case's points per card feature (None: the history could not be scored)."""
    if HIST_POINTS in snap.arrays:
        return np.asarray(snap.arrays[HIST_POINTS])
    if snap.cross_fitted:
        return np.asarray(snap.arrays[POINTS])
    return None


def card_counterparts(
    snap: Snapshot, dep: CardDependence
) -> tuple[list[str], np.ndarray, np.ndarray | None]:
    """(levels, swapped margin_points (n, G), carried margin_points (n, G) or None).

    A case's own level holds its own margin. ``carried`` is None when the history could not be
    scored by the card (no distribution to carry the proxies over).
    """
    levels = snap.group_levels
    group_cols = list(snap.meta.get("group_columns", []))
    codes = np.asarray(snap.group_codes)[dep.rows].astype(np.int64)
    margin = dep.margin_points
    n, G = len(dep.rows), len(levels)
    group_j = [j for j, r in enumerate(dep.roles) if r == "group"]
    own_group = dep.points[:, group_j].sum(axis=1) if group_j else np.zeros(n)
    swapped = np.empty((n, G))
    for h, label in enumerate(levels):
        parts = label.split("/") if len(group_cols) > 1 else [label]
        new = 0.0
        for j in group_j:
            col = group_cols.index(dep.features[j])
            level = parts[col] if col < len(parts) else MISSING_LEVEL
            new += _level_points(dep.card, dep.features[j], level)
        swapped[:, h] = margin - own_group + new
    hist = _history_points(snap)
    if hist is None:
        return levels, swapped, None
    hist_codes = np.asarray(snap.hist_group_codes).astype(np.int64)
    carried = swapped.copy()
    for j, role in enumerate(dep.roles):
        if role != "proxy":
            continue
        own = dep.points[:, j]
        # F_g(p): mid-rank position of the case's points within its own group's history
        F = np.empty(n)
        for g in range(G):
            sel = codes == g
            if not sel.any():
                continue
            ref = np.sort(hist[hist_codes == g, j])
            if len(ref) == 0:
                F[sel] = 0.5
                continue
            below = np.searchsorted(ref, own[sel], side="left")
            upto = np.searchsorted(ref, own[sel], side="right")
            F[sel] = (below + upto) / (2.0 * len(ref))
        for h in range(G):
            target = np.sort(hist[hist_codes == h, j])
            if len(target) == 0:
                continue
            # inverse empirical distribution function of group h at F
            at = np.clip(np.ceil(F * len(target)).astype(np.int64) - 1, 0, len(target) - 1)
            moved = np.where(codes == h, own, target[at])
            carried[:, h] += moved - own
    return levels, swapped, carried


def _neighbours_on_card(snap: Snapshot, card: Scorecard, ids: list[str]) -> list[dict[str, Any]]:
    hist = _history_points(snap)
    if hist is None or not ids:
        return []
    hist_ids = np.asarray(snap.hist_ids).astype(str)
    out = []
    for cid in ids:  # a handful of similar cases
        at = np.flatnonzero(hist_ids == cid)
        if len(at) == 0:
            continue
        pts = float(hist[at[0]].sum() + card.intercept)
        out.append(
            {
                "case_id": cid,
                "points": pts,
                "decision": decision_word(pts >= card.cutoff),
            }
        )
    return out


def explain_card(
    snap: Snapshot, i: int, values: dict[str, Any], neighbour_ids: list[str]
) -> dict[str, Any] | None:
    """The card's section of ``closecall explain`` for snapshot row ``i`` (None: no card).

    Keys: card (file name), kind, scaling, cutoff, factor, offset, pdo, points, margin_points,
    margin (log-odds or None), probability (or None), decision, baseline_points, baseline,
    contributions [{feature, role, value, points, mean_points, contribution_points,
    contribution}], group_part, proxy_part, rest (log-odds; *_points in points),
    margin_group_neutral, margin_neutral (and *_points), rests_on_group, rests_on_proxies,
    counterparts [{group, margin_group_swapped, decision_group_swapped, flips_group_swapped,
    margin_carried, decision_carried, flips_carried}] (margins in points), similar_cases
    [{case_id, points, decision}], cannot (what could not be computed), notes.
    """
    dep = card_dependence(snap, np.array([i]))
    if dep is None:
        return None
    meta = card_meta(snap)
    assert meta is not None
    card = dep.card
    factor = card.factor

    def lo(x: float) -> float | None:
        return _logodds(factor, x)

    margin_pts = float(dep.margin_points[0])
    gp, pp, rest = (float(dep.part_points(r)[0]) for r in ("group", "proxy", "other"))
    favourable = margin_pts >= 0
    contributions = _card_contributions(dep, values)
    counterparts = _card_counterpart_rows(snap, dep, i, favourable)
    probability = None
    if card.offset is not None and factor is not None:
        probability = float(1.0 / (1.0 + np.exp(-(dep.total[0] - card.offset) / factor)))
    return {
        "card": card.source.name,
        "kind": card.kind,
        "scaling": card.scaling,
        "cutoff": card.cutoff,
        "factor": factor,
        "offset": card.offset,
        "pdo": card.pdo,
        "points": float(dep.total[0]),
        "margin_points": margin_pts,
        "margin": lo(margin_pts),
        "probability": probability,
        "decision": decision_word(favourable),
        "baseline_points": dep.baseline_points,
        "baseline": lo(dep.baseline_points),
        "baseline_source": meta.get("baseline_source", "history"),
        "contributions": contributions,
        "group_part_points": gp,
        "proxy_part_points": pp,
        "rest_points": rest,
        "group_part": lo(gp),
        "proxy_part": lo(pp),
        "rest": lo(rest),
        "margin_group_neutral_points": margin_pts - gp,
        "margin_neutral_points": margin_pts - gp - pp,
        "margin_group_neutral": lo(margin_pts - gp),
        "margin_neutral": lo(margin_pts - gp - pp),
        "rests_on_group": (margin_pts - gp >= 0) != favourable,
        "rests_on_proxies": (margin_pts - gp - pp >= 0) != favourable,
        "counterparts": counterparts,
        "similar_cases": _neighbours_on_card(snap, card, neighbour_ids),
        "cannot": list(meta.get("cannot", [])),
        "notes": list(meta.get("notes", [])) + list(card.notes),
    }


def _logodds(factor: float | None, x: float) -> float | None:
    """Card points in log-odds (None for a card without a scaling)."""
    return None if factor is None else float(x) / factor


def _card_contributions(dep: CardDependence, values: dict[str, Any]) -> list[dict[str, Any]]:
    """Each feature's points on the case against its mean, largest first."""
    cp = dep.contributions_points[0]
    order = np.argsort(-np.abs(cp), kind="stable")
    return [
        {
            "feature": dep.features[j],
            "role": dep.roles[j],
            "value": values.get(dep.features[j]),
            "points": float(dep.points[0, j]),
            "mean_points": float(dep.mean_points[j]),
            "contribution_points": float(cp[j]),
            "contribution": _logodds(dep.card.factor, cp[j]),
        }
        for j in order
    ]


def _card_counterpart_rows(
    snap: Snapshot, dep: CardDependence, i: int, favourable: bool
) -> list[dict[str, Any]]:
    """The card's margin (points) with the group swapped to each other level, and with the
    features that go with the group carried over (when the card can say)."""
    levels, swapped, carried = card_counterparts(snap, dep)
    own = int(snap.group_codes[i])
    counterparts = []
    for h, label in enumerate(levels):
        if h == own:
            continue
        s = float(swapped[0, h])
        row: dict[str, Any] = {
            "group": label,
            "margin_group_swapped": s,
            "decision_group_swapped": decision_word(s >= 0),
            "flips_group_swapped": (s >= 0) != favourable,
            "margin_carried": None,
            "decision_carried": None,
            "flips_carried": None,
        }
        if carried is not None:
            c = float(carried[0, h])
            row.update(
                margin_carried=c,
                decision_carried=decision_word(c >= 0),
                flips_carried=(c >= 0) != favourable,
            )
        counterparts.append(row)
    return counterparts
