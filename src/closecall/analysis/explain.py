"""Everything about one case, as plain JSON-able data: why it is close and how firmly.

``explain_case`` is the one engine function behind ``closecall explain`` and the TUI's case
view. Its keys are stable; new keys may be added, none renamed or removed without a note.

Keys of the returned dict
-------------------------
case_id, snapshot, row : the case, the snapshot id and its row in the snapshot
group : the case's group level
outcome : "favourable" | "unfavourable" | "unknown" (pending cases)
cross_fitted : True when the case was scored by a model that never saw it (one labelled file)
model : the model analysed ("pooled": it sees the group, so its dependence is visible)
reference : the study's reference model (pooled or deployed)
lens : {"name", "threshold"} the cost lens used (default: the operative, first one)
values : {feature: value} the case's features on the data's own scale (None = missing)
margin, decision : the analysed model's margin (log-odds minus logit of the threshold) and
    decision ("favourable" | "unfavourable")
decisions : {model: {"margin", "decision"}} every model of the suite under the lens
dependence : {
    "baseline": margin of an all-average case under the same fitted row,
    "contributions": [{"feature", "role" (group|proxy|other), "value", "contribution"}]
        largest |contribution| first; they add up to margin − baseline,
    "group_part", "proxy_part", "rest", "dependence" (= group_part + proxy_part), "share",
    "margin_group_neutral", "margin_neutral" (group and proxies neutralised),
    "rests_on_group", "rests_on_proxies" : bool,
    "group_part_se", "dependence_se" : float (from the weights' inverse penalised Hessian),
    "rests_on_group_uncertain", "rests_on_proxies_uncertain" : bool (the verdict could flip
    within its 95 % interval) }
counterparts : [{"group", "margin_group_swapped", "decision_group_swapped", "flips_group_swapped",
    "margin_carried", "decision_carried", "flips_carried",
    "carried": [{"feature", "from", "to"}]}] one per other group level
bands : {
    "uncertainty": {"epsilon" (absolute, 1.92), "low", "high", "straddles_zero"},
    "equally_good": {"epsilon" (relative), "slack" (absolute), "low", "high", "straddles_zero"},
    "flip_epsilon": smallest relative ε whose equally-good band reaches zero,
    "quad": x̃ᵀH⁻¹x̃,
    "exact": None, or (with exact=True) {"low", "high", "closed_low", "closed_high",
        "slack", "epsilon", "unbounded"} for the equally-good set solved exactly; an edge is
        None (and "unbounded" true) when the set has no edge that way }
neighbours : {"k", "neighbours": [{"case_id", "group", "outcome", "distance", "review"}],
    "favourable_share", "by_group": [{"group", "neighbours", "favourable_share",
    "mean_distance"}]}
proxies : {"flagged": [feature names], "recoverability_auc": float}
fit_flags : {"this_case": [flags of the fits that scored this case], "in_snapshot": int}; a flag
    is a dict described in closecall.suite.fit_flags (separation, one outcome value, …: the fit was
    kept with a penalty despite the problem)
deployed_card : None without ``[deployed] scorecard``; else the card's own reasons for the case
    (points, margin against its cut-off, contributions, group and proxy parts, neutralised
    margins, counterparts, similar cases; keys in closecall.analysis.deployed_card.explain_card)

All margins are in log-odds; > 0 means the favourable decision.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from closecall.analysis.counterparts import counterparts_for_case
from closecall.analysis.dependence import dependence, rests_on_uncertainty
from closecall.analysis.deployed_card import explain_card
from closecall.analysis.multiplicity import UNCERTAINTY_EPSILON, bands, exact_band
from closecall.analysis.neighbours import neighbours_for_case
from closecall.core.vocabulary import decision_word
from closecall.suite.fit_flags import case_fit_flags, snapshot_flags
from closecall.suite.snapshot import Snapshot

MODEL = "pooled"


def case_values(snap: Snapshot, row: int) -> dict[str, Any]:
    """A case's features decoded from the design back to the data's own scale."""
    x = np.asarray(snap.X[row], dtype=float)
    out: dict[str, Any] = {}
    col = 0
    for f in snap.encoder.features:
        width = len(f.design_names())
        block = x[col : col + width]
        col += width
        if f.kind == "numeric":
            missing = f.missing_indicator and block[1] == 1.0
            out[f.name] = None if missing else float(block[0] * f.sd + f.mean)
        else:
            code = int(np.argmax(block)) + 1 if width and block.any() else 0
            out[f.name] = f.levels[code] if f.levels else None
    return out


def _outcome_word(value: int) -> str:
    return {1: "favourable", 0: "unfavourable"}.get(int(value), "unknown")


def explain_case(
    study: Any, case_id: str, *, exact: bool = False, lens: str | None = None
) -> dict[str, Any]:
    """Every quantity of the analysis for one case (see the module docstring for the keys).

    Parameters
    ----------
    study : an open OpenedStudy
    case_id : the case to explain
    exact : also solve the equally-good band exactly (slower: a convex problem per edge)
    lens : cost lens name; None = the operative (first) lens
    """
    snap: Snapshot = study.snapshot
    config = study.config
    i = snap.case_index(case_id)
    lens_obj = snap.lens(lens)
    values = case_values(snap, i)
    margin, dep_part = _dependence_part(snap, i, values, lens)
    bands_part = _bands_part(study, case_id, i, margin, lens, exact)
    neighbours = _with_reviews(config, neighbours_for_case(snap, i, config.multiplicity.neighbours))
    return {
        "case_id": str(snap.case_ids[i]),
        "snapshot": snap.id,
        "row": i,
        "group": str(snap.group_labels[i]),
        "outcome": _outcome_word(int(snap.outcome[i])),
        "cross_fitted": snap.cross_fitted,
        "model": MODEL,
        "reference": snap.reference,
        "lens": {"name": lens_obj.name, "threshold": lens_obj.threshold},
        "values": values,
        "margin": margin,
        "decision": decision_word(margin > 0),
        "decisions": snap.decisions_for(i, lens),
        "dependence": dep_part,
        "counterparts": counterparts_for_case(snap, i, MODEL, lens),
        "bands": bands_part,
        "neighbours": neighbours,
        "proxies": {
            "flagged": snap.proxies.proxies,
            "recoverability_auc": snap.proxies.recoverability,
        },
        "fit_flags": {
            "this_case": case_fit_flags(snap, i),
            "in_snapshot": len(snapshot_flags(snap)),
        },
        "deployed_card": explain_card(
            snap, i, values, [str(n["case_id"]) for n in neighbours["neighbours"]]
        ),
    }


def _dependence_part(
    snap: Snapshot, i: int, values: dict[str, Any], lens: str | None
) -> tuple[float, dict[str, Any]]:
    """The case's margin and its "dependence" section: contributions, parts, neutral margins."""
    dep = dependence(snap, MODEL, lens, np.array([i]))
    rests_unc = rests_on_uncertainty(snap, dep)
    order = np.argsort(-np.abs(dep.contributions[0]), kind="stable")
    contrib = [
        {
            "feature": dep.features[j],
            "role": dep.roles[j],
            "value": values.get(dep.features[j]),
            "contribution": float(dep.contributions[0, j]),
        }
        for j in order
    ]
    return float(dep.margin[0]), {
        "baseline": float(dep.baseline[0]),
        "contributions": contrib,
        "group_part": float(dep.group_part[0]),
        "proxy_part": float(dep.proxy_part[0]),
        "rest": float(dep.rest[0]),
        "dependence": float(dep.dependence[0]),
        "share": float(dep.share[0]),
        "margin_group_neutral": float(dep.margin_group_neutral[0]),
        "margin_neutral": float(dep.margin_neutral[0]),
        "rests_on_group": bool(dep.rests_on_group[0]),
        "rests_on_proxies": bool(dep.rests_on_proxies[0]),
        "group_part_se": float(rests_unc.group_se[0]),
        "dependence_se": float(rests_unc.dependence_se[0]),
        "rests_on_group_uncertain": bool(rests_unc.group_uncertain[0]),
        "rests_on_proxies_uncertain": bool(rests_unc.proxies_uncertain[0]),
    }


def _bands_part(
    study: Any, case_id: str, i: int, margin: float, lens: str | None, exact: bool
) -> dict[str, Any]:
    """The case's "bands" section: uncertainty, equally-good, flip ε and (optionally) exact."""
    snap: Snapshot = study.snapshot
    eps = float(study.config.multiplicity.epsilon)
    b = bands(snap, MODEL, eps, lens)
    unc, eg = float(b.uncertainty[i]), float(b.equally_good[i])
    return {
        "uncertainty": {
            "epsilon": UNCERTAINTY_EPSILON,
            "low": margin - unc,
            "high": margin + unc,
            "straddles_zero": bool(abs(margin) <= unc),
        },
        "equally_good": {
            "epsilon": eps,
            "slack": float(b.slack[i]),
            "low": margin - eg,
            "high": margin + eg,
            "straddles_zero": bool(abs(margin) <= eg),
        },
        "flip_epsilon": float(b.flip_epsilon[i]),
        "quad": float(b.quad[i]),
        "exact": _exact_part(study, case_id, eps, lens) if exact else None,
    }


def _exact_part(study: Any, case_id: str, eps: float, lens: str | None) -> dict[str, Any]:
    """The equally-good band solved exactly; an edge the set does not have is None."""
    ex = exact_band(study, case_id, eps, model=MODEL, lens=lens)
    part = {k: ex[k] for k in ("low", "high", "closed_low", "closed_high", "slack", "epsilon")}
    part["unbounded"] = bool(not np.isfinite(ex["low"]) or not np.isfinite(ex["high"]))
    for k in ("low", "high"):
        if not np.isfinite(part[k]):
            part[k] = None
    return part


def _with_reviews(config: Any, nb: dict[str, Any]) -> dict[str, Any]:
    """Add each similar case's effective review (latest ledger entry), when there is one.

    Treat like cases alike: a reviewer sees how similar cases were decided by people as well
    as how they turned out. Without a ledger, or without read access, ``review`` is None; a
    damaged ledger is refused (UserError), never read as "no reviews".
    """
    from closecall.core.errors import AccessDenied
    from closecall.review.decisions import latest_entries
    from closecall.review.ledger.backend import ledger_present

    for n in nb["neighbours"]:
        n["review"] = None
    if not ledger_present(config.review.ledger):
        return nb
    try:  # one ledger connection for all the similar cases
        latest = latest_entries(config, [n["case_id"] for n in nb["neighbours"]])
    except AccessDenied:
        return nb  # this login may not read the ledger: no reviews shown
    for n in nb["neighbours"]:
        e = latest.get(n["case_id"])
        if e is not None:
            n["review"] = {"action": e.action, "reason": e.reason, "seq": e.seq}
    return nb
