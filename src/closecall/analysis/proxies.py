"""Proxy detection: association with the group × influence in the group-unaware model.

A feature is a *proxy* when it is both associated with the group attribute and influential in
the model that leaves the group out: dropping the group does not make a model unaware when
such features carry the same information.

Association (0 = none, 1 = perfect):
- numeric feature: 2·|AUC − 0.5| of the feature separating one group level from the rest
  (the largest over levels when there are more than two). It is |Somers' D|, a rank measure:
  free of units and robust to outliers;
- categorical feature: Cramér's V of the feature × group table.
Both run from 0 to 1, so one threshold serves both kinds (normalised mutual information was
the alternative; it has no natural scale for a numeric feature).

Influence: the share of the unaware model's margin variance carried by the feature's linear
component, Var(c_j) / Var(margin), with c_j = Σ_k w_k (x_k − E[x_k]) over the feature's design
columns. Shares need not sum to one when features are correlated.

A feature is a proxy when association ≥ [proxies] association (default 0.3, the usual
"medium" size for φ-like measures) and influence ≥ [proxies] influence (default 0.02: it moves
at least 2 % of the unaware margins' variation). Flagging runs in rounds ("peeling", see
``detect_proxies``): a weaker proxy that takes over the group signal once a stronger one is
removed is flagged too.

Group recoverability: cross-validated AUC of predicting the group from all non-group features
together (macro one-vs-rest when there are more than two levels).

References
----------
Datta, Fredrikson, Ko, Mardziel, Sen, "Use privacy in data-driven systems", CCS 2017.
Yeom, Datta, Fredrikson, "Hunting for discriminatory proxies in linear regression models",
NeurIPS 2018.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
from scipy.stats import chi2_contingency, rankdata
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import roc_auc_score
from sklearn.model_selection import StratifiedKFold

RECOVERABILITY_MAX_ROWS = 100_000


def auc_association(x: np.ndarray, group_codes: np.ndarray, n_levels: int) -> float:
    """2·|AUC − 0.5| of x for each level against the rest; the largest over levels."""
    ranks = rankdata(x)
    best = 0.0
    levels = range(1) if n_levels == 2 else range(n_levels)
    for g in levels:
        pos = group_codes == g
        n1, n0 = int(pos.sum()), int((~pos).sum())
        if n1 == 0 or n0 == 0:
            continue
        auc = (ranks[pos].sum() - n1 * (n1 + 1) / 2) / (n1 * n0)
        best = max(best, 2 * abs(auc - 0.5))
    return float(best)


def cramers_v(codes: np.ndarray, group_codes: np.ndarray) -> float:
    """Cramér's V (no bias correction) of two coded categorical arrays."""
    a, b = _dense_codes(codes), _dense_codes(group_codes)
    nb = int(b.max()) + 1
    table = np.bincount(a * nb + b, minlength=(int(a.max()) + 1) * nb).reshape(-1, nb)
    table = table[table.sum(1) > 0][:, table.sum(0) > 0].astype(float)
    k = min(table.shape) - 1
    if k == 0:
        return 0.0
    chi2 = chi2_contingency(table, correction=False)[0]
    return float(np.sqrt(chi2 / (table.sum() * k)))


def _dense_codes(codes: np.ndarray) -> np.ndarray:
    """Codes renumbered 0..k-1 in order of value (np.unique's inverse, without the sort)."""
    codes = np.asarray(codes)
    if codes.dtype.kind in "iub" and len(codes) and codes.min() >= 0:
        present = np.bincount(codes) > 0
        return np.asarray((np.cumsum(present) - 1)[codes])
    return np.asarray(np.unique(codes, return_inverse=True)[1])


def influence_shares(
    X: np.ndarray,
    coef: np.ndarray,
    column_source: list[str],
    names: list[str],
    cov: np.ndarray | None = None,
) -> dict[str, float]:
    """Var(c_j)/Var(margin) for each named source feature, in the model with weights coef.

    Both variances are quadratic forms in the design's covariance matrix, so one covariance
    (``cov``, computed here if not given) serves every feature and every peeling round.
    """
    if cov is None:
        cov = np.atleast_2d(np.cov(X, rowvar=False, bias=True))
    margin_var = float(coef @ cov @ coef)
    out: dict[str, float] = {}
    src = np.array(column_source)
    for name in names:
        cols = np.flatnonzero(src == name)
        w = coef[cols]
        var = float(w @ cov[np.ix_(cols, cols)] @ w)
        out[name] = var / margin_var if margin_var > 0 else 0.0
    return out


def group_recoverability(
    X: np.ndarray,
    group_codes: np.ndarray,
    n_levels: int,
    seed: int,
    folds: int = 5,
    columns: np.ndarray | None = None,
) -> float:
    """Held-out AUC of predicting the group from the given (non-group) design columns.

    ``columns`` (a boolean mask) picks the columns after the rows are subsampled, so a large
    history is never copied whole.
    """
    rng = np.random.default_rng(seed)
    idx = np.arange(len(group_codes))
    if len(idx) > RECOVERABILITY_MAX_ROWS:
        idx = np.sort(rng.choice(idx, RECOVERABILITY_MAX_ROWS, replace=False))
    Xs, gs = X[idx], group_codes[idx]
    if columns is not None:
        Xs = Xs[:, columns]
    scores = np.zeros((len(idx), n_levels))
    skf = StratifiedKFold(n_splits=folds, shuffle=True, random_state=seed)
    for train, test in skf.split(Xs, gs):
        clf = LogisticRegression(C=1.0, max_iter=500)
        clf.fit(Xs[train], gs[train])
        proba = clf.predict_proba(Xs[test])
        scores[np.ix_(test, clf.classes_)] = proba
    if n_levels == 2:
        return float(roc_auc_score(gs, scores[:, 1]))
    return float(roc_auc_score(gs, scores, multi_class="ovr", average="macro"))


@dataclass
class ProxyRow:
    feature: str
    kind: str
    association: float
    association_measure: str  # "2|AUC-0.5|" or "Cramér's V"
    influence: float  # in the unaware model
    proxy: bool
    why: str
    influence_peeled: float | None = None  # largest influence over the peeling rounds
    round: int = 0  # peeling round that flagged it (1 = unaware model; 0 = not flagged)


@dataclass
class ProxyReport:
    rows: list[ProxyRow]
    recoverability: float
    association_threshold: float
    influence_threshold: float

    @property
    def proxies(self) -> list[str]:
        return [r.feature for r in self.rows if r.proxy]

    def to_json(self) -> dict[str, Any]:
        return {
            "recoverability_auc": self.recoverability,
            "association_threshold": self.association_threshold,
            "influence_threshold": self.influence_threshold,
            "proxies": self.proxies,
            "features": [asdict(r) for r in self.rows],
        }

    @classmethod
    def from_json(cls, d: dict[str, Any]) -> ProxyReport:
        return cls(
            rows=[ProxyRow(**r) for r in d["features"]],
            recoverability=d["recoverability_auc"],
            association_threshold=d["association_threshold"],
            influence_threshold=d["influence_threshold"],
        )


def _project(X: np.ndarray, margin: np.ndarray, keep: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """Coefficients (zeros outside keep) of the least-squares projection of a centred margin
    on the centred columns in keep: what those columns alone can reproduce of the margin."""
    coef = np.zeros(X.shape[1])
    if keep.any():
        Xc = X[rows][:, keep]
        Xc = Xc - Xc.mean(axis=0)
        m = margin[rows] - margin[rows].mean()
        coef[keep] = np.linalg.lstsq(Xc, m, rcond=None)[0]
    return coef


def detect_proxies(
    *,
    raw_columns: dict[str, tuple[str, np.ndarray]],
    X: np.ndarray,
    unaware_coef: np.ndarray,
    column_source: list[str],
    group_codes: np.ndarray,
    n_levels: int,
    association_threshold: float,
    influence_threshold: float,
    extra: tuple[str, ...] = (),
    never: tuple[str, ...] = (),
    seed: int = 0,
    nongroup_mask: np.ndarray | None = None,
) -> ProxyReport:
    """Score every non-group feature and flag the proxies.

    ``raw_columns`` maps feature name to (kind, values): imputed numbers for numeric features,
    category codes for categorical ones.

    Flagging runs in rounds (peeling). Round 1 scores influence in the unaware model. When
    proxies are found, the unaware margin is projected (least squares) on the columns that are
    left, which approximates refitting without the proxies, and influence is scored again:
    a feature that takes over the group signal once the stronger proxy is gone is flagged in
    the next round. Rounds stop when none is added.
    """
    names = list(raw_columns)
    mask = nongroup_mask if nongroup_mask is not None else np.ones(X.shape[1], dtype=bool)
    src = np.array(column_source)
    association: dict[str, tuple[float, str]] = {}
    for name in names:
        kind, values = raw_columns[name]
        if kind == "numeric":
            association[name] = (auc_association(values, group_codes, n_levels), "2|AUC-0.5|")
        else:
            association[name] = (cramers_v(values, group_codes), "Cramér's V")
    cov = np.atleast_2d(np.cov(X, rowvar=False, bias=True))
    first = influence_shares(X, unaware_coef, column_source, names, cov)
    rows_used = np.arange(len(X))
    if len(X) > RECOVERABILITY_MAX_ROWS:
        rng = np.random.default_rng(seed)
        rows_used = np.sort(rng.choice(len(X), RECOVERABILITY_MAX_ROWS, replace=False))
    margin = X @ unaware_coef
    flagged_in: dict[str, int] = {n: 0 for n in extra if n in association and n not in never}
    peak = dict(first)
    coef = unaware_coef
    for round_no in range(1, len(names) + 2):
        infl = first if round_no == 1 else influence_shares(X, coef, column_source, names, cov)
        new = [
            n
            for n in names
            if n not in flagged_in
            and n not in never
            and association[n][0] >= association_threshold
            and infl[n] >= influence_threshold
        ]
        for n in names:
            if n not in flagged_in or flagged_in[n] == round_no:
                peak[n] = max(peak[n], infl[n])
        for n in new:
            flagged_in[n] = round_no
        if not new and round_no > 1:
            break
        keep = mask & ~np.isin(src, list(flagged_in))
        coef = _project(X, margin, keep, rows_used)
    rows: list[ProxyRow] = []
    for name in names:
        kind, _ = raw_columns[name]
        assoc, measure = association[name]
        r = flagged_in.get(name)
        if name in never:
            flagged, why = False, "listed in [proxies] never"
        elif name in extra:
            flagged, why = True, "listed in [proxies] extra"
        elif r == 1:
            flagged, why = True, "association and influence above thresholds"
        elif r is not None:
            flagged, why = True, "takes over the group signal once other proxies are removed"
        else:
            flagged, why = False, "below a threshold"
        rows.append(
            ProxyRow(name, kind, assoc, measure, first[name], flagged, why, peak[name], r or 0)
        )
    recover = group_recoverability(X, group_codes, n_levels, seed, columns=mask)
    return ProxyReport(rows, recover, association_threshold, influence_threshold)
