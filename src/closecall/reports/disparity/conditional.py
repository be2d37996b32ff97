"""Conditional disparity: are overrides in one direction likelier for a group at equal margin?

The fit is ordinary maximum likelihood (statsmodels ``Logit``) unless a group is separated (no
override, or only overrides, in its risk set) or the fit fails; then Firth's penalised
likelihood (:mod:`closecall.reports.disparity.firth`) estimates every group instead of dropping one.
Standard errors are cluster-robust by reviewer (reviews by one person are not independent)
when there are enough reviewers to cluster on, and model-based otherwise; the fit says which.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import pandas as pd
import statsmodels.api as sm
from scipy import stats
from statsmodels.tools.sm_exceptions import (
    ConvergenceWarning,
    PerfectSeparationError,
    PerfectSeparationWarning,
)

from closecall.reports.disparity.firth import firth_logit
from closecall.reports.disparity.intervals import z_value
from closecall.reports.disparity.power import Detectable, detectable_odds_ratio
from closecall.reports.disparity.table import check_reviews

Direction = Literal["to_unfavourable", "to_favourable"]

#: Fewer events than this per estimated coefficient makes the fit unreliable (common practice;
#: Peduzzi et al., J Clin Epidemiol 49 (1996) 1373-1379).
EVENTS_PER_VARIABLE = 10
#: Fewer reviewers than this and cluster-robust standard errors are not the primary ones; fewer
#: than ``FEW_CLUSTERS`` and a note says they may still be too narrow (common practice; A. C.
#: Cameron and D. L. Miller, "A practitioner's guide to cluster-robust inference", Journal of
#: Human Resources 50 (2015) 317-372).
MIN_CLUSTERS = 10
FEW_CLUSTERS = 30
ML = "maximum likelihood"
FIRTH = "Firth penalised likelihood"


@dataclass(frozen=True)
class GroupOddsRatio:
    """Odds of the override for one group against the reference group, margin held equal."""

    group: str
    at_risk: int
    events: int
    odds_ratio: float | None
    low: float | None
    high: float | None
    p_value: float | None
    note: str | None
    model_based_low: float | None = None
    model_based_high: float | None = None
    model_based_p: float | None = None
    cluster_low: float | None = None  # cluster-robust by reviewer (CR1, t with G − 1 df)
    cluster_high: float | None = None
    cluster_p: float | None = None
    detectable: Detectable | None = None


@dataclass(frozen=True)
class ConditionalFit:
    """Logistic regression of one override direction on group and margin."""

    direction: Direction
    risk_set: str
    reference_group: str | None
    at_risk: int
    events: int
    fitted: bool
    margin_odds_ratio: float | None  # per unit of margin (log-odds)
    margin_low: float | None
    margin_high: float | None
    rows: tuple[GroupOddsRatio, ...]
    level: float
    notes: tuple[str, ...]
    estimation: str = "none"  # maximum likelihood, Firth penalised likelihood, or none
    standard_errors: str = "none"  # which standard errors the intervals and p-values use
    reviewers: int = 0  # reviewers (clusters) in the fit


def cluster_robust_se(
    X: np.ndarray, y: np.ndarray, beta: np.ndarray, clusters: np.ndarray
) -> np.ndarray:
    """CR1 cluster-robust standard errors of a logistic fit.

    V = G/(G−1) · (N−1)/(N−K) · H⁻¹ (Σ_g s_g s_gᵀ) H⁻¹, with s_g the score summed over
    cluster g and H = XᵀWX (the small-sample factor of Stata and statsmodels' default).

    References
    ----------
    A. C. Cameron and D. L. Miller, "A practitioner's guide to cluster-robust inference",
    Journal of Human Resources 50 (2015) 317-372.
    """
    p = 1.0 / (1.0 + np.exp(-(X @ beta)))
    H = X.T @ (X * (p * (1.0 - p))[:, None])
    G = int(clusters.max()) + 1
    S = np.zeros((G, X.shape[1]))
    np.add.at(S, clusters, X * (y - p)[:, None])
    n, k = X.shape
    Hinv = np.linalg.inv(H)
    V = G / (G - 1) * (n - 1) / (n - k) * Hinv @ (S.T @ S) @ Hinv
    return np.asarray(np.sqrt(np.clip(np.diag(V), 0.0, None)), dtype=float)


def conditional_disparity(
    reviews: pd.DataFrame,
    direction: Direction = "to_unfavourable",
    *,
    reference_group: str | None = None,
    level: float = 0.95,
) -> ConditionalFit:
    """Odds ratio of an override direction for each group against a reference, at equal margin.

    Fits ``logit P(event) = b0 + b_m * margin + sum_g b_g [group = g]`` over the risk set: for
    "to_unfavourable", the decided reviews the model had decided favourably; for
    "to_favourable", those it had decided unfavourably. ``exp(b_g)`` is the odds ratio.

    - Maximum likelihood (statsmodels ``Logit``) with Wald intervals, from cluster-robust
      standard errors by reviewer (CR1, t with G − 1 degrees of freedom) when at least
      ``MIN_CLUSTERS`` reviewers are in the fit, else model-based ones; both are kept.
    - When a group has no event or nothing but events (separation: its maximum-likelihood
      odds ratio is 0 or infinite) or the fit fails, Firth's penalised likelihood estimates
      every group instead, with profile penalised-likelihood intervals and tests.

    Parameters
    ----------
    reviews
        Effective-review table (with a ``reviewer`` column).
    direction
        Which override to model.
    reference_group
        Group the odds ratios compare against; default the largest group in the risk set that
        has both events and non-events (the largest group when none has).
    level
        Confidence level of the intervals.

    References
    ----------
    B. Green and Y. Chen, "Disparate interactions", FAT* 2019.
    A. Albert and J. A. Anderson, Biometrika 71 (1984) 1-10 (separation).
    D. Firth, Biometrika 80 (1993) 27-38; G. Heinze and M. Schemper, Statistics in Medicine 21
    (2002) 2409-2419 (penalised likelihood). A. C. Cameron and D. L. Miller, Journal of Human
    Resources 50 (2015) 317-372 (cluster-robust inference).
    """
    rs = _RiskSet.of(check_reviews(reviews), direction, level)
    why = rs.nothing_to_fit()
    if why is not None:
        return rs.empty(why)
    ref = reference_group if reference_group is not None else rs.default_reference()
    if ref not in rs.at_risk:
        return rs.empty(f"reference group {ref!r} has no reviews in the risk set")
    others = [g for g in rs.order if g != ref]
    x = rs.design(others)
    reviewer = rs.risk["reviewer"].astype(str).to_numpy()
    clusters = len(np.unique(reviewer))
    if rs.note_separated():
        return _by_firth(rs, ref, others, x, clusters)
    res = _maximum_likelihood(x, rs.y, rs.notes)
    if res is None:
        return _by_firth(rs, ref, others, x, clusters)
    return _ml_fit(rs, ref, others, x, res, reviewer, clusters)


def _by_firth(
    rs: _RiskSet, ref: str, others: list[str], x: pd.DataFrame, clusters: int
) -> ConditionalFit:
    """The same model by Firth's penalised likelihood, or no odds ratios when even that has
    no solution (a singular design: e.g. the margins in the risk set do not vary)."""
    try:
        return _firth(
            rs.direction,
            rs.text,
            ref,
            x,
            rs.y,
            rs.order,
            others,
            rs.at_risk,
            rs.events,
            rs.level,
            rs.notes,
            clusters,
        )
    except np.linalg.LinAlgError:
        return rs.empty(
            "Firth's penalised likelihood could not be fitted either (the design is "
            "singular, e.g. the margins in the risk set do not vary): no odds ratios"
        )


@dataclass
class _RiskSet:
    """The reviews at risk of one override direction, their events by group and the notes."""

    direction: Direction
    text: str
    risk: pd.DataFrame
    y: np.ndarray
    at_risk: dict[str, int]
    events: dict[str, int]
    order: list[str]  # groups, largest first
    level: float
    notes: list[str]

    @classmethod
    def of(cls, df: pd.DataFrame, direction: Direction, level: float) -> _RiskSet:
        """For "to_unfavourable", the decided reviews the model had decided favourably; for
        "to_favourable", those it had decided unfavourably."""
        model_fav = direction == "to_unfavourable"
        risk = df[df["decided"] & (df["model_fav"] == model_fav)]
        text = (
            "decided reviews the model decided favourably"
            if model_fav
            else "decided reviews the model decided unfavourably"
        )
        agg = risk.groupby("group")[direction].agg(["size", "sum"])
        at_risk = {str(g): int(v) for g, v in agg["size"].items()}
        events = {str(g): int(v) for g, v in agg["sum"].items()}
        order = sorted(at_risk, key=lambda g: (-at_risk[g], g))
        y = risk[direction].to_numpy(dtype=float)
        return cls(direction, text, risk, y, at_risk, events, order, level, [])

    def nothing_to_fit(self) -> str | None:
        """Why there is nothing to model (None when there is)."""
        if len(self.risk) == 0:
            return "no reviews in the risk set"
        if self.y.sum() == 0:
            what = self.direction.replace("_", " ")
            return f"no overrides {what} in the risk set: nothing to model"
        if self.y.sum() == len(self.y):
            return "every case in the risk set was overridden: nothing to compare against"
        if len(self.order) < 2:
            return "only one group has reviews in the risk set: nothing to compare"
        return None

    def default_reference(self) -> str:
        """The largest group with both events and non-events (the largest when none has)."""
        estimable = [g for g in self.order if 0 < self.events[g] < self.at_risk[g]]
        return estimable[0] if estimable else self.order[0]

    def note_separated(self) -> bool:
        """Note each group with no override or only overrides (separation); True if any."""
        separated = [g for g in self.order if not 0 < self.events[g] < self.at_risk[g]]
        for g in separated:
            kind = "no" if self.events[g] == 0 else "only"
            self.notes.append(
                f"group {g}: {kind} overrides in {self.at_risk[g]} case(s) at risk; its maximum-"
                "likelihood odds ratio is 0 or unbounded (separation), so every group is "
                "estimated by Firth's penalised likelihood instead"
            )
        return bool(separated)

    def empty(self, reason: str, ref: str | None = None) -> ConditionalFit:
        """A fit with no odds ratios, saying why."""
        rows = tuple(
            GroupOddsRatio(g, self.at_risk[g], self.events[g], None, None, None, None, None)
            for g in self.order
        )
        return ConditionalFit(
            self.direction,
            self.text,
            ref,
            len(self.risk),
            int(self.y.sum()),
            False,
            None,
            None,
            None,
            rows,
            self.level,
            (*self.notes, reason),
        )

    def design(self, others: list[str]) -> pd.DataFrame:
        """Constant, margin and one indicator per non-reference group (with a note when the
        rarer outcome is thin for that many coefficients)."""
        x = pd.DataFrame({"const": 1.0, "margin": self.risk["margin"].to_numpy(dtype=float)})
        for g in others:
            x[f"group[{g}]"] = (self.risk["group"].to_numpy() == g).astype(float)
        k = x.shape[1] - 1
        rare = int(min(self.y.sum(), len(self.y) - self.y.sum()))
        if rare < EVENTS_PER_VARIABLE * k:
            self.notes.append(
                f"only {rare} cases in the rarer outcome for {k} coefficients (fewer than "
                f"{EVENTS_PER_VARIABLE} per coefficient, common practice): estimates are "
                "unstable and intervals approximate"
            )
        return x


def _maximum_likelihood(x: pd.DataFrame, y: np.ndarray, notes: list[str]) -> Any | None:
    """statsmodels' Logit fit, or None (with a note) when Firth's must be used instead."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", PerfectSeparationWarning)
            warnings.simplefilter("ignore", ConvergenceWarning)
            res = sm.Logit(y, x).fit(disp=0, method="newton", maxiter=100)
    except (PerfectSeparationError, PerfectSeparationWarning, np.linalg.LinAlgError) as exc:
        notes.append(f"maximum likelihood failed ({exc}); Firth's penalised likelihood used")
        return None
    bse = np.asarray(res.bse, dtype=float)
    if not res.mle_retvals.get("converged", False) or not np.all(np.isfinite(bse)):
        notes.append(
            "maximum likelihood did not converge or gave infinite standard errors (likely "
            "quasi-separation by margin); Firth's penalised likelihood used"
        )
        return None
    return res


@dataclass(frozen=True)
class _Errors:
    """The standard errors of a maximum-likelihood fit: model-based, cluster-robust by
    reviewer when there are two reviewers or more, and which of them the intervals use."""

    bse: np.ndarray
    mb_p: np.ndarray
    cl_bse: np.ndarray | None
    cl_p: np.ndarray | None
    z: float
    t_crit: float
    use_cluster: bool
    text: str

    def primary(self, j: int) -> float:
        """The standard error of coefficient j the intervals use."""
        use = self.use_cluster and self.cl_bse is not None
        return float(self.cl_bse[j]) if use and self.cl_bse is not None else float(self.bse[j])


def _standard_errors(
    x: pd.DataFrame,
    y: np.ndarray,
    params: np.ndarray,
    res: Any,
    reviewer: np.ndarray,
    clusters: int,
    level: float,
    notes: list[str],
) -> _Errors:
    """Model-based and cluster-robust (CR1, t with G − 1 df) errors; notes on which is used."""
    z = z_value(level)
    cl_bse = cl_p = None
    t_crit = z
    if clusters >= 2:
        cl_bse = cluster_robust_se(x.to_numpy(dtype=float), y, params, pd.factorize(reviewer)[0])
        with np.errstate(divide="ignore", invalid="ignore"):
            cl_p = 2.0 * stats.t.sf(np.abs(params / cl_bse), clusters - 1)
        t_crit = float(stats.t.ppf(0.5 + level / 2.0, clusters - 1))
    use_cluster = cl_bse is not None and clusters >= MIN_CLUSTERS and np.all(np.isfinite(cl_bse))
    if use_cluster:
        text = (
            f"cluster-robust by reviewer ({clusters} reviewers; CR1, t with {clusters - 1} "
            "degrees of freedom)"
        )
        if clusters < FEW_CLUSTERS:
            notes.append(
                f"only {clusters} reviewers to cluster on (fewer than {FEW_CLUSTERS}, common "
                "practice): cluster-robust intervals may still be somewhat too narrow"
            )
    else:
        text = "model-based (reviews treated as independent)"
        notes.append(
            f"only {clusters} reviewer(s) in this risk set (fewer than {MIN_CLUSTERS}): too few "
            "to cluster on, so the intervals treat reviews as independent; if reviewers differ "
            "in how often they override, they are too narrow"
            + ("; the cluster-robust figures are in the JSON output" if cl_bse is not None else "")
        )
    bse = np.asarray(res.bse, dtype=float)
    mb_p = np.asarray(res.pvalues, dtype=float)
    return _Errors(bse, mb_p, cl_bse, cl_p, z, t_crit, bool(use_cluster), text)


def _ml_fit(
    rs: _RiskSet,
    ref: str,
    others: list[str],
    x: pd.DataFrame,
    res: Any,
    reviewer: np.ndarray,
    clusters: int,
) -> ConditionalFit:
    """The odds ratios of a maximum-likelihood fit, with both kinds of intervals."""
    params = np.asarray(res.params, dtype=float)
    se = _standard_errors(x, rs.y, params, res, reviewer, clusters, rs.level, rs.notes)

    def wald(j: int, s: float, crit: float) -> tuple[float, float]:
        return float(np.exp(params[j] - crit * s)), float(np.exp(params[j] + crit * s))

    rows: list[GroupOddsRatio] = []
    for g in rs.order:
        at, ev = rs.at_risk[g], rs.events[g]
        if g == ref:
            rows.append(GroupOddsRatio(g, at, ev, 1.0, None, None, None, "reference group"))
            continue
        j = 2 + others.index(g)
        mlo, mhi = wald(j, se.bse[j], se.z)
        clo = chi = cp = None
        if se.cl_bse is not None and se.cl_p is not None and np.isfinite(se.cl_bse[j]):
            clo, chi = wald(j, se.cl_bse[j], se.t_crit)
            cp = float(se.cl_p[j])
        lo, hi, p = (clo, chi, cp) if se.use_cluster else (mlo, mhi, float(se.mb_p[j]))
        rows.append(
            GroupOddsRatio(
                g,
                at,
                ev,
                float(np.exp(params[j])),
                lo,
                hi,
                p,
                None,
                model_based_low=mlo,
                model_based_high=mhi,
                model_based_p=float(se.mb_p[j]),
                cluster_low=clo,
                cluster_high=chi,
                cluster_p=cp,
                detectable=detectable_odds_ratio(se.primary(j)),
            )
        )
    m_lo, m_hi = wald(1, se.primary(1), se.t_crit if se.use_cluster else se.z)
    return ConditionalFit(
        direction=rs.direction,
        risk_set=rs.text,
        reference_group=ref,
        at_risk=len(rs.risk),
        events=int(rs.y.sum()),
        fitted=True,
        margin_odds_ratio=float(np.exp(params[1])),
        margin_low=m_lo,
        margin_high=m_hi,
        rows=tuple(rows),
        level=rs.level,
        notes=tuple(rs.notes),
        estimation=ML,
        standard_errors=se.text,
        reviewers=clusters,
    )


def _firth(
    direction: Direction,
    risk_set: str,
    ref: str,
    x: pd.DataFrame,
    y: np.ndarray,
    order: list[str],
    others: list[str],
    at_risk: dict[str, int],
    events: dict[str, int],
    level: float,
    notes: list[str],
    clusters: int,
) -> ConditionalFit:
    """The same model by Firth's penalised likelihood (profile-likelihood intervals)."""
    fit = firth_logit(x.to_numpy(dtype=float), y, level=level)
    if clusters > 1:
        notes.append(
            "Firth's intervals are model-based: they treat reviews as independent and do not "
            "allow for reviewers who differ"
        )
    rows: list[GroupOddsRatio] = []
    for g in order:
        at, ev = at_risk[g], events[g]
        if g == ref:
            rows.append(GroupOddsRatio(g, at, ev, 1.0, None, None, None, "reference group"))
            continue
        j = 2 + others.index(g)
        lo, hi = float(np.exp(fit.low[j])), float(np.exp(fit.high[j]))
        rows.append(
            GroupOddsRatio(
                g,
                at,
                ev,
                float(np.exp(fit.params[j])),
                lo,
                hi,
                float(fit.p_values[j]),
                "Firth" if ev in (0, at) else None,
                model_based_low=lo,
                model_based_high=hi,
                model_based_p=float(fit.p_values[j]),
                detectable=detectable_odds_ratio(float(fit.se[j])),
            )
        )
    if not fit.converged:
        notes.append("Firth's fit did not fully converge: read the estimates with care")
    return ConditionalFit(
        direction=direction,
        risk_set=risk_set,
        reference_group=ref,
        at_risk=len(y),
        events=int(y.sum()),
        fitted=True,
        margin_odds_ratio=float(np.exp(fit.params[1])),
        margin_low=float(np.exp(fit.low[1])),
        margin_high=float(np.exp(fit.high[1])),
        rows=tuple(rows),
        level=level,
        notes=tuple(notes),
        estimation=FIRTH,
        standard_errors="profile penalised likelihood (reviews treated as independent)",
        reviewers=clusters,
    )
