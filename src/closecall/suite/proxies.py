"""Proxy detection: association with the group × influence in the group-unaware model.

A feature is a *proxy* when it is both associated with the group attribute and influential in
the model that leaves the group out: dropping the group does not make a model unaware when
such features carry the same information.

Association (0 = none, 1 = perfect):
- numeric feature: 2·|AUC − 0.5| of the feature separating one group level from the rest
  (the largest over levels when there are more than two). It is |Somers' D|, a rank measure:
  free of units and robust to outliers;
- categorical feature: Cramér's V of the feature × group table with Bergsma's bias correction
  (the plain V is biased upwards in small samples and with many levels).
Both run from 0 to 1, so one threshold serves both kinds (normalised mutual information was
the alternative; it has no natural scale for a numeric feature).

Influence: the share of the unaware model's margin variance carried by the feature's linear
component, Var(c_j) / Var(margin), with c_j = Σ_k w_k (x_k − E[x_k]) over the feature's design
columns. Shares need not sum to one when features are correlated.

Uncertainty: both measures get seeded bootstrap intervals (vectorised; see
``association_draws`` and ``influence_draws``), and the flags read the intervals, not the
points. A feature is flagged as a proxy when

- its association is shown: the whole association interval is at or above [proxies]
  association (default 0.3, the usual "medium" size for φ-like measures) — a feature not shown
  to be associated with the group cannot stand in for it; and
- its influence cannot be ruled out: the influence interval reaches [proxies] influence
  (default 0.02) — missing a proxy hides dependence from the reviewer, while an extra flag only
  moves part of the margin into the proxy part, which the reviewer sees.

A flag whose influence interval also reaches below the threshold is marked *uncertain*. A
feature whose association interval straddles the threshold (and whose influence reaches) is
listed as a *possible proxy*, not flagged: `[proxies] extra` makes it one. Flagging runs in
rounds ("peeling", see ``detect_proxies``): a weaker proxy that takes over the group signal once
a stronger one is removed is flagged too.

Group recoverability: cross-validated AUC of predicting the group from all non-group features
together (macro one-vs-rest when there are more than two levels). ``proxy_sets`` searches for
*sets* of features that jointly carry the group: greedily, the feature whose removal lowers the
recoverability most, then the next.

References
----------
W. Bergsma, "A bias-correction for Cramér's V and Tschuprow's T", Journal of the Korean
Statistical Society 42 (2013) 323-328.
B. Efron and R. J. Tibshirani, "An Introduction to the Bootstrap", Chapman & Hall 1993.
Datta, Fredrikson, Ko, Mardziel, Sen, "Use privacy in data-driven systems", CCS 2017.
Yeom, Datta, Fredrikson, "Hunting for discriminatory proxies in linear regression models",
NeurIPS 2018.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np

# scipy.stats and scikit-learn load inside the functions that use them: reading a snapshot's
# proxy report (every `closecall queue`) must not pay for them

RECOVERABILITY_MAX_ROWS = 100_000
BOOT_REPLICATES = 200  # bootstrap replicates of association and influence
BOOT_ROWS = 20_000  # at most this many history rows are resampled (m-out-of-n rescaling)
BOOT_CHUNK = 50  # replicates computed at a time
LEVEL = 0.95


def auc_association(x: np.ndarray, group_codes: np.ndarray, n_levels: int) -> float:
    """2·|AUC − 0.5| of x for each level against the rest; the largest over levels."""
    from scipy.stats import rankdata

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
    from scipy.stats import chi2_contingency

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


def _table(codes: np.ndarray, group_codes: np.ndarray) -> np.ndarray:
    """Feature × group contingency table without empty rows or columns."""
    a, b = _dense_codes(codes), _dense_codes(group_codes)
    nb = int(b.max()) + 1
    table = np.bincount(a * nb + b, minlength=(int(a.max()) + 1) * nb).reshape(-1, nb)
    return np.asarray(table[table.sum(1) > 0][:, table.sum(0) > 0], dtype=float)


def corrected_v_of_tables(tables: np.ndarray) -> np.ndarray:
    """Bergsma's bias-corrected Cramér's V of a stack of r × c tables (shape (..., r, c)).

    φ̃² = max(0, χ²/n − (r−1)(c−1)/(n−1)), r̃ = r − (r−1)²/(n−1), c̃ = c − (c−1)²/(n−1),
    Ṽ = sqrt(φ̃² / min(r̃ − 1, c̃ − 1)). Rows or columns empty in a replicate still count in
    r and c (their share of the table is tiny when it happens).
    """
    t = np.asarray(tables, dtype=float)
    r, c = t.shape[-2], t.shape[-1]
    n = t.sum(axis=(-2, -1))
    expected = t.sum(axis=-1, keepdims=True) * t.sum(axis=-2, keepdims=True) / n[..., None, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        chi2 = np.where(expected > 0, (t - expected) ** 2 / expected, 0.0).sum(axis=(-2, -1))
        phi2 = np.maximum(0.0, chi2 / n - (r - 1) * (c - 1) / (n - 1))
        rr = r - (r - 1) ** 2 / (n - 1)
        cc = c - (c - 1) ** 2 / (n - 1)
        v = np.sqrt(phi2 / np.minimum(rr - 1, cc - 1))
    return np.asarray(np.where(np.isfinite(v), np.clip(v, 0.0, 1.0), 0.0))


def cramers_v_corrected(codes: np.ndarray, group_codes: np.ndarray) -> float:
    """Bergsma's (2013) bias-corrected Cramér's V of two coded categorical arrays."""
    table = _table(codes, group_codes)
    if min(table.shape) < 2:
        return 0.0
    return float(corrected_v_of_tables(table))


def _weighted_auc_association(
    x: np.ndarray, group_codes: np.ndarray, n_levels: int, weights: np.ndarray
) -> np.ndarray:
    """2·|AUC − 0.5| (largest over levels) for every row of case weights (B, n), ties counted
    one half: the Mann–Whitney statistic with each case counted ``weight`` times."""
    order = np.argsort(x, kind="stable")
    xs = x[order]
    gs = group_codes[order]
    w = weights[:, order]
    starts = np.flatnonzero(np.r_[True, xs[1:] != xs[:-1]])
    ends = np.r_[starts[1:], len(xs)]
    tie_of = np.repeat(np.arange(len(starts)), ends - starts)
    best = np.zeros(w.shape[0])
    levels = range(1) if n_levels == 2 else range(n_levels)
    for g in levels:  # group levels, not cases
        pos = np.flatnonzero(gs == g)
        c0 = np.cumsum(np.where(gs == g, 0.0, w), axis=1)  # weight of the others up to here
        below = np.where(starts > 0, c0[:, np.maximum(starts - 1, 0)], 0.0)  # (B, ties)
        half = below + 0.5 * (c0[:, ends - 1] - below)
        w1 = w[:, pos]
        n1, n0 = w1.sum(axis=1), c0[:, -1]
        with np.errstate(invalid="ignore", divide="ignore"):
            auc = (w1 * half[:, tie_of[pos]]).sum(axis=1) / (n1 * n0)
        best = np.maximum(best, np.nan_to_num(2 * np.abs(auc - 0.5)))
    return best


def bootstrap_weights(
    n: int, rng: np.random.Generator, n_boot: int = BOOT_REPLICATES, max_rows: int = BOOT_ROWS
) -> tuple[np.ndarray, np.ndarray]:
    """The rows (all n, or a seeded subsample of ``max_rows``) and Poisson(1) case weights
    (n_boot, rows) that every replicate of association and influence shares."""
    rows = np.arange(n) if n <= max_rows else np.sort(rng.choice(n, max_rows, replace=False))
    return rows, rng.poisson(1.0, size=(n_boot, len(rows))).astype(np.float64)


def association_draws(
    kind: str,
    values: np.ndarray,
    group_codes: np.ndarray,
    n_levels: int,
    rng: np.random.Generator,
    rows: np.ndarray,
    weights: np.ndarray,
    full: float | None = None,
) -> np.ndarray:
    """Bootstrap replicates of a feature's association with the group (vectorised).

    Categorical: the feature × group table redrawn as a multinomial (what resampling the cases
    does to it), bias-corrected V of each. Numeric: the shared Poisson(1) case weights on
    ``rows``; when they are a subsample of m of n cases the replicates' spread around the
    subsample's value is shrunk by √(m/n) and centred on the full value (the m-out-of-n
    rescaling), so the interval describes the whole history.
    """
    n_boot = len(weights)
    if kind == "categorical":
        table = _table(values, group_codes)
        if min(table.shape) < 2:
            return np.zeros(n_boot)
        total = int(table.sum())
        draws = rng.multinomial(total, (table / total).ravel(), size=n_boot)
        return corrected_v_of_tables(draws.reshape(n_boot, *table.shape))
    n, m = len(values), len(rows)
    if full is None:  # the point value over every case (the caller usually has it)
        full = auc_association(values, group_codes, n_levels)
    x, g = np.asarray(values)[rows], np.asarray(group_codes)[rows]
    reps = np.concatenate(
        [
            _weighted_auc_association(x, g, n_levels, weights[b : b + BOOT_CHUNK])
            for b in range(0, n_boot, BOOT_CHUNK)  # replicates in chunks: bounded memory
        ]
    )
    centre = auc_association(x, g, n_levels) if m < n else full
    return np.asarray(full + np.sqrt(m / n) * (reps - centre))


def influence_draws(
    X: np.ndarray,
    coef: np.ndarray,
    intercept: float,
    y: np.ndarray,
    penalty: float,
    mask: np.ndarray,
    rows: np.ndarray,
    weights: np.ndarray,
) -> np.ndarray:
    """Bootstrap replicates of the unaware model's weights, (n_boot, p), by the one-step
    (linearised) bootstrap: w_b = ŵ + H⁻¹ s_b, with s_b = Σ_i (ω_bi − 1) x̃_i (y_i − p_i) the
    score of the shared Poisson(1) case weights ω on ``rows`` at the fit and H the penalised
    Hessian (from those rows, scaled to n). On a subsample of m of n cases the score is scaled
    by √(n/m), so the draws have the spread of the whole history's weights. Columns outside
    ``mask`` stay 0.
    """
    n, m = len(y), len(rows)
    n_boot = len(weights)
    cols = np.flatnonzero(mask)
    Xt = np.hstack([np.ones((m, 1)), np.asarray(X[rows][:, cols], dtype=float)])
    p = 1.0 / (1.0 + np.exp(-(intercept + Xt[:, 1:] @ coef[cols])))
    H = (n / m) * (Xt * (p * (1.0 - p))[:, None]).T @ Xt
    H[1:, 1:] += penalty * np.eye(len(cols))
    resid = Xt * (np.asarray(y[rows], dtype=float) - p)[:, None]
    scores = np.sqrt(n / m) * ((weights - 1.0) @ resid)  # (B, 1 + active)
    steps = np.linalg.solve(H, scores.T).T
    out = np.tile(np.asarray(coef, dtype=float), (n_boot, 1))
    out[:, cols] += steps[:, 1:]
    return out


def influence_of_draws(
    W: np.ndarray, cov: np.ndarray, column_source: list[str], names: list[str]
) -> dict[str, np.ndarray]:
    """Var(c_j)/Var(margin) for every row of weights W (B, p), vectorised."""
    total = np.einsum("bi,ij,bj->b", W, cov, W)
    src = np.array(column_source)
    out: dict[str, np.ndarray] = {}
    for name in names:
        cols = np.flatnonzero(src == name)
        w = W[:, cols]
        part = np.einsum("bi,ij,bj->b", w, cov[np.ix_(cols, cols)], w)
        with np.errstate(invalid="ignore", divide="ignore"):
            out[name] = np.where(total > 0, part / total, 0.0)
    return out


def _interval(draws: np.ndarray, level: float) -> tuple[float, float]:
    alpha = (1.0 - level) / 2.0
    return float(np.quantile(draws, alpha)), float(np.quantile(draws, 1.0 - alpha))


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
    history is never copied whole. ``folds`` is lowered to the smallest level's count (at
    least 2) so a study with very small levels is scored rather than refused.
    """
    from sklearn.linear_model import LogisticRegression
    from sklearn.metrics import roc_auc_score
    from sklearn.model_selection import StratifiedKFold

    rng = np.random.default_rng(seed)
    idx = np.arange(len(group_codes))
    if len(idx) > RECOVERABILITY_MAX_ROWS:
        idx = np.sort(rng.choice(idx, RECOVERABILITY_MAX_ROWS, replace=False))
    counts = np.bincount(group_codes[idx], minlength=n_levels)
    if counts[counts > 0].min() < 2:  # a small level thinned out by the subsample: use all
        idx = np.arange(len(group_codes))
        counts = np.bincount(group_codes, minlength=n_levels)
    Xs, gs = X[idx], group_codes[idx]
    if columns is not None:
        Xs = Xs[:, columns]
    scores = np.zeros((len(idx), n_levels))
    # no more folds than the smallest level has cases ([data] min_group_cases may be 2)
    k = int(max(2, min(folds, counts[counts > 0].min())))
    skf = StratifiedKFold(n_splits=k, shuffle=True, random_state=seed)
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
    association_low: float | None = None  # bootstrap interval (None: not computed)
    association_high: float | None = None
    influence_low: float | None = None  # in the round that flagged it (else round 1)
    influence_high: float | None = None
    uncertain: bool = False  # flagged, but its influence interval also reaches below
    possible: bool = False  # not flagged: association interval straddles, influence reaches


@dataclass
class ProxyReport:
    rows: list[ProxyRow]
    recoverability: float
    association_threshold: float
    influence_threshold: float
    level: float | None = None  # of the bootstrap intervals (None: not computed)
    n_boot: int = 0

    @property
    def proxies(self) -> list[str]:
        return [r.feature for r in self.rows if r.proxy]

    def to_json(self) -> dict[str, Any]:
        return {
            "recoverability_auc": self.recoverability,
            "association_threshold": self.association_threshold,
            "influence_threshold": self.influence_threshold,
            "proxies": self.proxies,
            "uncertain": [r.feature for r in self.rows if r.proxy and r.uncertain],
            "possible": [r.feature for r in self.rows if r.possible],
            "level": self.level,
            "n_boot": self.n_boot,
            "features": [asdict(r) for r in self.rows],
        }

    @classmethod
    def from_json(cls, d: dict[str, Any]) -> ProxyReport:
        return cls(
            rows=[ProxyRow(**r) for r in d["features"]],
            recoverability=d["recoverability_auc"],
            association_threshold=d["association_threshold"],
            influence_threshold=d["influence_threshold"],
            level=d.get("level"),
            n_boot=int(d.get("n_boot", 0)),
        )


def _projection(X: np.ndarray, keep: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """(p, p) matrix P with P @ w = the coefficients (zeros outside keep) of the least-squares
    projection of the centred margin X @ w on the centred columns in keep: what those columns
    alone can reproduce of it. Linear in w, so one P serves every bootstrap replicate."""
    P = np.zeros((X.shape[1], X.shape[1]))
    if keep.any():
        Xc = np.asarray(X[rows], dtype=float)
        Xc = Xc - Xc.mean(axis=0)
        P[keep] = np.linalg.lstsq(Xc[:, keep], Xc, rcond=None)[0]
    return P


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
    y: np.ndarray | None = None,
    unaware_intercept: float = 0.0,
    penalty: float = 1.0,
    level: float = LEVEL,
    n_boot: int = BOOT_REPLICATES,
) -> ProxyReport:
    """Score every non-group feature, with bootstrap intervals, and flag the proxies.

    ``raw_columns`` maps feature name to (kind, values): imputed numbers for numeric features,
    category codes for categorical ones. With the history's outcomes ``y`` (and the unaware
    fit's intercept and penalty), association and influence get seeded bootstrap intervals
    and a feature is flagged when its association interval lies at or above the threshold and
    its influence interval reaches the threshold (module docstring); without ``y`` the point
    values decide. Flagging runs in rounds (peeling, see :func:`_peel`).
    """
    names = list(raw_columns)
    mask = nongroup_mask if nongroup_mask is not None else np.ones(X.shape[1], dtype=bool)
    boot = y is not None and n_boot > 0
    rng = np.random.default_rng([seed, 14])  # a stream of its own, seeded by the study
    rows_b, weights_b = bootstrap_weights(len(X), rng, n_boot) if boot else (None, None)
    association, a_int = _associations(
        raw_columns, group_codes, n_levels, rng, rows_b, weights_b, level
    )
    W0 = (
        influence_draws(X, unaware_coef, unaware_intercept, y, penalty, mask, rows_b, weights_b)
        if y is not None and rows_b is not None and weights_b is not None
        else None
    )
    flagged_in = {n: 0 for n in extra if n in association and n not in never}

    def qualifies(name: str, influence: tuple[float, float]) -> bool:
        associated = name not in never and a_int[name][0] >= association_threshold
        return associated and influence[1] >= influence_threshold

    first, peak, i_int = _peel(
        X, unaware_coef, W0, column_source, names, mask, flagged_in, qualifies, level, seed
    )
    rows = [
        _proxy_row(
            name,
            raw_columns[name][0],
            association[name],
            a_int[name],
            i_int[name],
            first=first[name],
            peak=peak[name],
            flagged_round=flagged_in.get(name),
            listed="never" if name in never else "extra" if name in extra else None,
            thresholds=(association_threshold, influence_threshold),
            boot=boot,
        )
        for name in names
    ]
    recover = group_recoverability(X, group_codes, n_levels, seed, columns=mask)
    return ProxyReport(
        rows,
        recover,
        association_threshold,
        influence_threshold,
        level=level if boot else None,
        n_boot=n_boot if boot else 0,
    )


def _associations(
    raw_columns: dict[str, tuple[str, np.ndarray]],
    group_codes: np.ndarray,
    n_levels: int,
    rng: np.random.Generator,
    rows_b: np.ndarray | None,
    weights_b: np.ndarray | None,
    level: float,
) -> tuple[dict[str, tuple[float, str]], dict[str, tuple[float, float]]]:
    """Each feature's association with the group (value, measure) and its bootstrap interval
    (the point value twice without replicates)."""
    association: dict[str, tuple[float, str]] = {}
    a_int: dict[str, tuple[float, float]] = {}
    for name, (kind, values) in raw_columns.items():
        if kind == "numeric":
            association[name] = (auc_association(values, group_codes, n_levels), "2|AUC-0.5|")
        else:
            association[name] = (
                cramers_v_corrected(values, group_codes),
                "Cramér's V (bias-corrected)",
            )
        if rows_b is not None and weights_b is not None:
            draws = association_draws(
                kind, values, group_codes, n_levels, rng, rows_b, weights_b, association[name][0]
            )
            a_int[name] = _interval(draws, level)
        else:
            a_int[name] = (association[name][0], association[name][0])
    return association, a_int


def _peel(
    X: np.ndarray,
    unaware_coef: np.ndarray,
    W0: np.ndarray | None,
    column_source: list[str],
    names: list[str],
    mask: np.ndarray,
    flagged_in: dict[str, int],
    qualifies: Callable[[str, tuple[float, float]], bool],
    level: float,
    seed: int,
) -> tuple[dict[str, float], dict[str, float], dict[str, tuple[float, float]]]:
    """The flagging rounds: fills ``flagged_in`` (name -> round) and returns the first round's
    influence, each feature's peak influence and the influence interval that decided it (the
    first round's for a feature never flagged).

    Round 1 scores influence in the unaware model. When proxies are found, the unaware margin
    is projected (least squares) on the columns that are left, which approximates refitting
    without the proxies, and influence is scored again (the bootstrap replicates of the
    weights are projected the same way): a feature that takes over the group signal once the
    stronger proxy is gone is flagged in the next round. Rounds stop when none is added.
    """
    src = np.array(column_source)
    cov = np.atleast_2d(np.cov(X, rowvar=False, bias=True))
    first = influence_shares(X, unaware_coef, column_source, names, cov)
    rows_used = np.arange(len(X))
    if len(X) > RECOVERABILITY_MAX_ROWS:
        rows_used = np.sort(
            np.random.default_rng(seed).choice(len(X), RECOVERABILITY_MAX_ROWS, replace=False)
        )
    i_int: dict[str, tuple[float, float]] = {}
    peak = dict(first)
    coef, W = unaware_coef, W0
    for round_no in range(1, len(names) + 2):
        infl = first if round_no == 1 else influence_shares(X, coef, column_source, names, cov)
        shares = influence_of_draws(W, cov, column_source, names) if W is not None else None
        here = {
            n: _interval(shares[n], level) if shares is not None else (infl[n], infl[n])
            for n in names
        }
        if round_no == 1:
            i_int.update(here)
        new = [n for n in names if n not in flagged_in and qualifies(n, here[n])]
        for n in names:
            if n not in flagged_in or flagged_in[n] == round_no:
                peak[n] = max(peak[n], infl[n])
        for n in new:
            flagged_in[n] = round_no
            i_int[n] = here[n]
        if not new and round_no > 1:
            break
        keep = mask & ~np.isin(src, list(flagged_in))
        P = _projection(X, keep, rows_used)
        coef = P @ unaware_coef
        W = W0 @ P.T if W0 is not None else None
    return first, peak, i_int


def _proxy_row(
    name: str,
    kind: str,
    association: tuple[float, str],
    a_int: tuple[float, float],
    i_int: tuple[float, float],
    *,
    first: float,
    peak: float,
    flagged_round: int | None,
    listed: str | None,
    thresholds: tuple[float, float],
    boot: bool,
) -> ProxyRow:
    """One feature's row: flagged or not, and why (``listed``: under [proxies] never/extra)."""
    association_threshold, influence_threshold = thresholds
    uncertain = possible = False
    if listed == "never":
        flagged, why = False, "listed in [proxies] never"
    elif listed == "extra":
        flagged, why = True, "listed in [proxies] extra"
    elif flagged_round is not None:
        flagged = True
        why = (
            "association and influence reach the thresholds"
            if flagged_round == 1
            else "takes over the group signal once other proxies are removed"
        )
        uncertain = i_int[0] < influence_threshold
        if uncertain:
            why += " (uncertain: its influence interval also reaches below the threshold)"
    elif a_int[0] < association_threshold <= a_int[1] and i_int[1] >= influence_threshold:
        flagged, possible = False, True
        why = (
            "possible proxy: its association interval straddles the threshold; list it "
            "under [proxies] extra to treat it as one"
        )
    else:
        flagged, why = False, "below a threshold"
    return ProxyRow(
        name,
        kind,
        association[0],
        association[1],
        first,
        flagged,
        why,
        peak,
        flagged_round or 0,
        association_low=a_int[0] if boot else None,
        association_high=a_int[1] if boot else None,
        influence_low=i_int[0] if boot else None,
        influence_high=i_int[1] if boot else None,
        uncertain=uncertain,
        possible=possible,
    )


@dataclass(frozen=True)
class ProxySetStep:
    """One step of the greedy search: the feature taken out and what recoverability is left."""

    removed: str
    auc_after: float
    drop: float


@dataclass(frozen=True)
class ProxySetSearch:
    """Which features jointly carry the group: greedy removal by drop in recoverability."""

    start_auc: float
    steps: tuple[ProxySetStep, ...]
    method: str
    rows: int

    @property
    def proxy_set(self) -> list[str]:
        return [s.removed for s in self.steps]


@dataclass(frozen=True)
class _FoldMoments:
    """Per training fold: the covariance of every column and, per level, the difference of
    class means (level against the rest); a column subset takes sub-blocks of them."""

    cov: list[np.ndarray]
    diff: list[list[np.ndarray | None]]


def _fold_moments(
    X: np.ndarray, group_codes: np.ndarray, n_levels: int, folds: np.ndarray
) -> _FoldMoments:
    levels = range(1) if n_levels == 2 else range(n_levels)
    covs, diffs = [], []
    for f in range(int(folds.max()) + 1):  # folds, not cases
        train = folds != f
        Xt = X[train]
        covs.append(np.atleast_2d(np.cov(Xt, rowvar=False)))
        row: list[np.ndarray | None] = []
        for g in levels:
            pos = group_codes[train] == (1 if n_levels == 2 else g)
            row.append(
                None if pos.all() or not pos.any() else Xt[pos].mean(axis=0) - Xt[~pos].mean(axis=0)
            )
        diffs.append(row)
    return _FoldMoments(covs, diffs)


def _lda_auc(
    X: np.ndarray,
    group_codes: np.ndarray,
    n_levels: int,
    folds: np.ndarray,
    cols: np.ndarray,
    moments: _FoldMoments,
) -> float:
    """Held-out AUC of linear-discriminant scores of the group from the columns ``cols``
    (macro one-vs-rest for more than two levels); a small ridge keeps Σ invertible."""
    from sklearn.metrics import roc_auc_score

    if len(cols) == 0:
        return 0.5
    levels = range(1) if n_levels == 2 else range(n_levels)
    scores = np.zeros((len(levels), len(X)))
    ridge = 1e-6 * np.eye(len(cols))
    for f in range(len(moments.cov)):  # folds, not cases
        test = folds == f
        cov = moments.cov[f][np.ix_(cols, cols)] + ridge
        for j in range(len(levels)):
            diff = moments.diff[f][j]
            if diff is not None:
                scores[j, test] = X[test][:, cols] @ np.linalg.solve(cov, diff[cols])
    aucs = []
    for j, g in enumerate(levels):
        target = group_codes == (1 if n_levels == 2 else g)
        if target.all() or not target.any():
            continue
        aucs.append(float(roc_auc_score(target, scores[j])))
    return float(np.mean(aucs)) if aucs else 0.5


def proxy_sets(
    X: np.ndarray,
    group_codes: np.ndarray,
    n_levels: int,
    column_source: list[str],
    features: list[str],
    seed: int,
    *,
    max_steps: int = 5,
    stop_auc: float = 0.6,
    max_rows: int = BOOT_ROWS,
    folds: int = 5,
) -> ProxySetSearch:
    """Greedy search for the set of features that jointly recover the group.

    Start from every non-group feature; at each step take out the feature whose removal lowers
    the held-out recoverability AUC most, until the AUC is at most ``stop_auc`` (0.6: little of
    the group is left to read off, our choice) or ``max_steps`` features are out. Recoverability
    here is the AUC of linear-discriminant scores (Fisher's discriminant: for this ranking it is
    the least-squares relative of the logistic fit behind the reported recoverability, and
    needs only means and a covariance per fold, so every candidate costs a small solve), on at
    most ``max_rows`` history rows drawn with the study's seed, K-fold stratified by group.

    References
    ----------
    R. A. Fisher, "The use of multiple measurements in taxonomic problems", Annals of Eugenics
    7 (1936) 179-188. Yeom, Datta & Fredrikson, NeurIPS 2018 (proxies as combinations).
    """
    from sklearn.model_selection import StratifiedKFold

    rng = np.random.default_rng([seed, 15])
    n = len(group_codes)
    rows = np.arange(n) if n <= max_rows else np.sort(rng.choice(n, max_rows, replace=False))
    Xs = np.asarray(X[rows], dtype=float)
    gs = np.asarray(group_codes)[rows]
    fold = np.empty(len(rows), dtype=np.int64)
    skf = StratifiedKFold(n_splits=folds, shuffle=True, random_state=seed)
    for k, (_, test) in enumerate(skf.split(np.zeros((len(rows), 1)), gs)):
        fold[test] = k
    src = np.array(column_source)
    left = list(features)

    moments = _fold_moments(Xs, gs, n_levels, fold)

    def auc_of(names: list[str]) -> float:
        return _lda_auc(Xs, gs, n_levels, fold, np.flatnonzero(np.isin(src, names)), moments)

    start = current = auc_of(left)
    steps: list[ProxySetStep] = []
    while left and len(steps) < max_steps and current > stop_auc:
        trial = {f: auc_of([x for x in left if x != f]) for f in left}  # features, not cases
        best = min(trial, key=lambda f: (trial[f], f))
        steps.append(ProxySetStep(best, trial[best], current - trial[best]))
        left.remove(best)
        current = trial[best]
    return ProxySetSearch(start, tuple(steps), "linear discriminant, held out", len(rows))
