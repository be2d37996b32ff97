"""Counterparts: a case carried into another group, and how the model would decide it there.

For every other group level h, two counterparts of case i under a model with weights w:

(a) *group swapped*: only the group columns change to h's;
(b) *group swapped and proxies carried over*: the group columns change and every flagged proxy
    feature is moved to where the case would stand in group h's history distribution:

    - numeric proxy: quantile mapping x' = F_h⁻¹(F_g(x)), with F_g the (mid-rank) empirical
      distribution of the feature among the case's own group g in the history and F_h⁻¹ the
      (linearly interpolated) quantile function of group h;
    - categorical proxy: the same mapping over categories ranked by frequency. Each group's
      categories are ordered from most to least frequent (ties in the encoder's level order)
      and laid out on [0, 1] with widths equal to their frequencies; a category maps to the
      category of group h whose interval holds the mid-point of its own interval in group g.
      The most common category of g goes to the most common of h, and so on, with the
      frequencies deciding how many of g's categories share one of h's (a monotone,
      rank-preserving transport of the frequencies).

Other features stay as they are. A missing-value indicator stays with its case.

The counterpart's margin is the scoring row's margin at the changed features, and its decision
the sign of that margin. A decision that changes under (b) but not (a) comes through the
proxies; one that changes under (a) comes through the group term itself.

References
----------
Black, Yeom, Fredrikson, "FlipTest: fairness testing via optimal transport", FAT* 2020 (per
feature transport between groups as a cheap stand-in for the optimal-transport map).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from closecall.core.vocabulary import decision_word
from closecall.setup.encode import EncodedFeature
from closecall.suite.snapshot import Snapshot

BLOCK_ROWS = 100_000


@dataclass
class Counterparts:
    """Counterpart margins of some cases in every group level."""

    model: str
    lens: str
    rows: np.ndarray  # snapshot rows
    levels: list[str]
    margin: np.ndarray  # (n,) the case's own margin
    swapped: np.ndarray  # (n, G) margin with only the group term swapped (own level = margin)
    transported: np.ndarray  # (n, G) margin with group swapped and proxies carried over
    moved: dict[str, np.ndarray] = field(default_factory=dict)  # proxy -> (n, G) new value


def _group_vectors(snap: Snapshot) -> tuple[np.ndarray, np.ndarray]:
    """(group design columns, (G, g) their values for each group level)."""
    gcols = np.flatnonzero(snap.encoder.group_mask)
    hg = np.asarray(snap.hist_group_codes)
    hX = snap.hist_X
    G = len(snap.group_levels)
    vec = np.zeros((G, len(gcols)))
    for g in range(G):
        first = int(np.flatnonzero(hg == g)[0])
        vec[g] = np.asarray(hX[first])[gcols]
    return gcols, vec


def quantile_map(x: np.ndarray, source: np.ndarray, target: np.ndarray) -> np.ndarray:
    """x' = F_target⁻¹(F_source(x)) with mid-rank F_source and interpolated F_target⁻¹."""
    s = np.sort(np.asarray(source, dtype=float))
    below = np.searchsorted(s, x, side="left")
    upto = np.searchsorted(s, x, side="right")
    u = (below + upto) / (2.0 * len(s))
    return np.asarray(np.quantile(np.asarray(target, dtype=float), np.clip(u, 0.0, 1.0)))


def frequency_rank_map(
    codes: np.ndarray, source: np.ndarray, target: np.ndarray, n_levels: int
) -> np.ndarray:
    """Map category codes from the source group's to the target group's frequency ranking."""

    def layout(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        counts = np.bincount(values, minlength=n_levels).astype(float)
        order = np.lexsort((np.arange(n_levels), -counts))  # most frequent first, ties by code
        freq = counts[order] / max(counts.sum(), 1.0)
        upper = np.cumsum(freq)
        return order, upper

    s_order, s_upper = layout(np.asarray(source))
    t_order, t_upper = layout(np.asarray(target))
    s_lower = np.concatenate([[0.0], s_upper[:-1]])
    rank_of = np.empty(n_levels, dtype=np.int64)
    rank_of[s_order] = np.arange(n_levels)
    mid = (s_lower + s_upper)[rank_of] / 2.0  # mid-point of each code's source interval
    # a category absent from the source group has zero width: it sits at its rank's edge
    pos = np.searchsorted(t_upper, mid[np.asarray(codes)], side="left")
    last_present = int(np.count_nonzero(np.diff(np.concatenate([[0.0], t_upper])) > 0)) - 1
    pos = np.clip(pos, 0, max(last_present, 0))
    return np.asarray(t_order[pos])


def _categorical_codes(block: np.ndarray) -> np.ndarray:
    """One-hot block (reference level dropped) back to level codes (0 = reference)."""
    block = np.asarray(block)
    if block.shape[1] == 0:
        return np.zeros(len(block), dtype=np.int64)
    return np.where(block.any(axis=1), block.argmax(axis=1) + 1, 0).astype(np.int64)


def _feature_columns(snap: Snapshot, f: EncodedFeature) -> np.ndarray:
    return np.flatnonzero(np.array(snap.meta["column_source"]) == f.name)


def counterparts(
    snap: Snapshot,
    rows: np.ndarray | None = None,
    model: str = "pooled",
    lens: str | None = None,
) -> Counterparts:
    """Counterpart margins of the given snapshot rows (default: every case) in every group."""
    W, row_of_case = snap.weights(model)
    if len(W) == 0:
        raise ValueError(f"model '{model}' has no fitted weights")
    lens_obj = snap.lens(lens)
    rows = np.arange(snap.n_cases) if rows is None else np.asarray(rows, dtype=np.int64)
    X = np.asarray(snap.X[rows], dtype=float)
    w_case = np.asarray(W, dtype=float)[np.asarray(row_of_case)[rows]]  # (n, p+1)
    margin = np.asarray(snap.margins(model, lens_obj.name))[rows]  # the snapshot's own margins
    codes = np.asarray(snap.group_codes)[rows]
    G = len(snap.group_levels)
    gcols, gvec = _group_vectors(snap)
    wg = w_case[:, 1:][:, gcols]  # (n, g)
    # (a) swap the group columns: change = w_g · (v_h − x_g)
    swapped = margin[:, None] + wg @ gvec.T - np.einsum("ij,ij->i", wg, X[:, gcols])[:, None]
    transported = swapped.copy()
    moved: dict[str, np.ndarray] = {}
    proxies = set(snap.proxies.proxies)
    hX = snap.hist_X
    hg = np.asarray(snap.hist_group_codes)
    for f in snap.encoder.features:
        if f.is_group or f.name not in proxies:
            continue
        cols = _feature_columns(snap, f)
        wf = w_case[:, 1:][:, cols]
        new_vals = np.empty((len(rows), G))
        if f.kind == "numeric":
            c = cols[0]
            hist_col = np.asarray(hX[:, c], dtype=float)
            x = X[:, c]
            for h in range(G):
                new = x.copy()
                for g in range(G):
                    sel = codes == g
                    if g != h and sel.any():
                        new[sel] = quantile_map(x[sel], hist_col[hg == g], hist_col[hg == h])
                transported[:, h] += wf[:, 0] * (new - x)
                new_vals[:, h] = new * f.sd + f.mean
        else:
            n_levels = len(f.levels)
            hist_codes = _categorical_codes(np.asarray(hX[:, cols]))
            own = _categorical_codes(X[:, cols])
            onehot_w = np.concatenate([np.zeros((len(rows), 1)), wf], axis=1)  # code -> weight
            for h in range(G):
                new = own.copy()
                for g in range(G):
                    sel = codes == g
                    if g != h and sel.any():
                        new[sel] = frequency_rank_map(
                            own[sel], hist_codes[hg == g], hist_codes[hg == h], n_levels
                        )
                idx = np.arange(len(rows))
                transported[:, h] += onehot_w[idx, new] - onehot_w[idx, own]
                new_vals[:, h] = new
        moved[f.name] = new_vals
    return Counterparts(
        model, lens_obj.name, rows, snap.group_levels, margin, swapped, transported, moved
    )


def counterparts_for_case(
    snap: Snapshot, row: int, model: str = "pooled", lens: str | None = None
) -> list[dict[str, Any]]:
    """The counterparts of one case in every other group level, as plain data."""
    cp = counterparts(snap, np.array([row]), model, lens)
    own = int(np.asarray(snap.group_codes)[row])
    encoder = {f.name: f for f in snap.encoder.features}
    X = np.asarray(snap.X[row], dtype=float)
    out: list[dict[str, Any]] = []
    for h, level in enumerate(cp.levels):
        if h == own:
            continue
        carried: list[dict[str, Any]] = []
        for name, vals in cp.moved.items():
            f = encoder[name]
            cols = _feature_columns(snap, f)
            if f.kind == "numeric":
                before: Any = float(X[cols[0]] * f.sd + f.mean)
                after: Any = float(vals[0, h])
            else:
                before = f.levels[int(_categorical_codes(X[None, cols])[0])]
                after = f.levels[int(vals[0, h])]
            carried.append({"feature": name, "from": before, "to": after})
        a, b = float(cp.swapped[0, h]), float(cp.transported[0, h])
        out.append(
            {
                "group": level,
                "margin_group_swapped": a,
                "decision_group_swapped": decision_word(a > 0),
                "margin_carried": b,
                "decision_carried": decision_word(b > 0),
                "flips_group_swapped": bool((a > 0) != (cp.margin[0] > 0)),
                "flips_carried": bool((b > 0) != (cp.margin[0] > 0)),
                "carried": carried,
            }
        )
    return out


def counterpart_flip_rates(snap: Snapshot, model: str = "pooled") -> list[dict[str, Any]]:
    """Per (own group, other group): share of cases whose decision changes in the counterpart,
    with the group swapped and with the proxies carried over too (computed in blocks)."""
    G = len(snap.group_levels)
    codes_all = np.asarray(snap.group_codes)
    # counts[g, h]: cases, flips swapped, flips carried, to favourable, to unfavourable
    counts = np.zeros((G, G, 5))
    for start in range(0, snap.n_cases, BLOCK_ROWS):
        rows = np.arange(start, min(start + BLOCK_ROWS, snap.n_cases))
        cp = counterparts(snap, rows, model)
        codes = codes_all[rows]
        fav = cp.margin > 0
        for g in range(G):
            sel = codes == g
            for h in range(G):
                a = cp.swapped[sel, h] > 0
                b = cp.transported[sel, h] > 0
                counts[g, h] += [
                    sel.sum(),
                    (a != fav[sel]).sum(),
                    (b != fav[sel]).sum(),
                    (b & ~fav[sel]).sum(),
                    (~b & fav[sel]).sum(),
                ]
    out: list[dict[str, Any]] = []
    for g, own in enumerate(snap.group_levels):
        for h, other in enumerate(snap.group_levels):
            n = counts[g, h, 0]
            if h == g or n == 0:
                continue
            out.append(
                {
                    "group": own,
                    "as_group": other,
                    "cases": int(n),
                    "flips_group_swapped": float(counts[g, h, 1] / n),
                    "flips_carried": float(counts[g, h, 2] / n),
                    "to_favourable_carried": float(counts[g, h, 3] / n),
                    "to_unfavourable_carried": float(counts[g, h, 4] / n),
                }
            )
    return out
