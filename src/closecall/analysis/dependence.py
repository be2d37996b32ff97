"""How much of a margin rests on the group attribute and on its proxies.

For a linear model the contribution of source feature j to case i's margin is

    c_ij = Σ_{k ∈ cols(j)} w_k (x_ik − E[x_k]),

summed over the feature's design columns, with E[x_k] the history mean and w the coefficient
row that scored the case. The contributions add up exactly to the margin minus the *baseline*
(the margin of a case with every feature at its history mean under the same row):

    margin_i = baseline_i + Σ_j c_ij,   baseline_i = b + Σ_k w_k E[x_k] − logit(t).

They are the interventional Shapley values of a linear model. Splitting the features into the
group attribute, its flagged proxies and the rest gives the *group part*, *proxy part* and
*rest*. Setting the group (and then also the proxies) to its history average removes those parts:

    margin with group neutralised            = margin − group part
    margin with group and proxies neutralised = margin − group part − proxy part

A case *rests on the group* when the first of these has the other sign, and *rests on the group
or its proxies* when the second has the other sign. The *dependence share* is
(|group part| + |proxy part|) / Σ_j |c_ij|: the share of the case's feature pull that comes
from the group and its proxies (0 when none does).

References
----------
Lundberg & Lee, "A unified approach to interpreting model predictions", NeurIPS 2017 (linear
SHAP: w_j (x_j − E[x_j]) under feature independence).
Janzing, Minorics, Blöbaum, "Feature relevance quantification in explainable AI: a causal
problem", AISTATS 2020 (interventional Shapley values).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from closecall.analysis.groups import group_slices
from closecall.core.numbers import logit
from closecall.suite.snapshot import Snapshot

BLOCK_ROWS = 100_000
ROLES = ("group", "proxy", "other")


@dataclass
class Dependence:
    """Per-feature contributions of a set of cases under one model and cost lens."""

    model: str
    lens: str
    features: list[str]  # source features, the columns of ``contributions``
    roles: list[str]  # "group" | "proxy" | "other" per feature
    rows: np.ndarray  # snapshot rows covered
    contributions: np.ndarray  # (len(rows), len(features)), log-odds
    baseline: np.ndarray  # (len(rows),) margin of an all-average case under the scoring row
    margin: np.ndarray  # (len(rows),)

    def _part(self, role: str) -> np.ndarray:
        cols = [i for i, r in enumerate(self.roles) if r == role]
        return np.asarray(self.contributions[:, cols].sum(axis=1))

    @property
    def group_part(self) -> np.ndarray:
        return self._part("group")

    @property
    def proxy_part(self) -> np.ndarray:
        return self._part("proxy")

    @property
    def rest(self) -> np.ndarray:
        return self._part("other")

    @property
    def dependence(self) -> np.ndarray:
        """Group part + proxy part (log-odds; negative = pulls towards unfavourable)."""
        return self.group_part + self.proxy_part

    @property
    def margin_group_neutral(self) -> np.ndarray:
        return self.margin - self.group_part

    @property
    def margin_neutral(self) -> np.ndarray:
        """Margin with the group and its proxies both set to their history average."""
        return self.margin - self.dependence

    @property
    def rests_on_group(self) -> np.ndarray:
        return np.asarray((self.margin > 0) != (self.margin_group_neutral > 0))

    @property
    def rests_on_proxies(self) -> np.ndarray:
        """Neutralising the group and its proxies together flips the decision."""
        return np.asarray((self.margin > 0) != (self.margin_neutral > 0))

    @property
    def share(self) -> np.ndarray:
        total = np.abs(self.contributions).sum(axis=1)
        dep = np.abs(self.group_part) + np.abs(self.proxy_part)
        return np.divide(dep, total, out=np.zeros_like(dep), where=total > 0)


def feature_roles(snap: Snapshot) -> tuple[list[str], list[str]]:
    """Source feature names in design order and their role: group, proxy or other."""
    proxies = set(snap.proxies.proxies)
    names: list[str] = []
    roles: list[str] = []
    for f in snap.encoder.features:
        names.append(f.name)
        roles.append("group" if f.is_group else "proxy" if f.name in proxies else "other")
    return names, roles


def history_means(snap: Snapshot) -> np.ndarray:
    """E[x_k]: the history mean of every design column."""
    return np.asarray(np.asarray(snap.hist_X).mean(axis=0))


def source_matrix(snap: Snapshot, features: list[str]) -> np.ndarray:
    """(p, F) 0/1 matrix summing design columns into their source features."""
    src = snap.meta["column_source"]
    S = np.zeros((len(src), len(features)))
    index = {name: j for j, name in enumerate(features)}
    for k, name in enumerate(src):
        S[k, index[name]] = 1.0
    return S


def dependence(
    snap: Snapshot,
    model: str = "pooled",
    lens: str | None = None,
    rows: np.ndarray | None = None,
) -> Dependence:
    """Contributions, baseline and margin for the given snapshot rows (default: all cases).

    Parameters
    ----------
    snap : the fitted snapshot
    model : a model with fitted weights (not ``deployed``)
    lens : cost lens name; None = the operative (first) lens
    rows : snapshot row numbers; None = every case
    """
    W, row_of_case = snap.weights(model)
    if len(W) == 0:
        raise ValueError(f"model '{model}' has no fitted weights to decompose")
    lens_obj = snap.lens(lens)
    t = float(logit(lens_obj.threshold))
    sel_rows = np.arange(snap.n_cases) if rows is None else np.asarray(rows, dtype=np.int64)
    features, roles = feature_roles(snap)
    S = source_matrix(snap, features)
    mu = history_means(snap)
    W = np.asarray(W, dtype=float)
    rc = np.asarray(row_of_case)[sel_rows]
    X = snap.X
    C = np.empty((len(sel_rows), len(features)))
    base = np.empty(len(sel_rows))
    marg = np.asarray(snap.margins(model, lens_obj.name))[sel_rows]  # the snapshot's margins
    for r in np.unique(rc):
        w = W[r]
        pos = np.flatnonzero(rc == r)
        base[pos] = w[0] + float(mu @ w[1:]) - t
        for start in range(0, len(pos), BLOCK_ROWS):
            chunk = pos[start : start + BLOCK_ROWS]
            Xc = np.asarray(X[sel_rows[chunk]], dtype=float)
            C[chunk] = ((Xc - mu) * w[1:]) @ S
    return Dependence(model, lens_obj.name, features, roles, sel_rows, C, base, marg)


def dependence_share(snap: Snapshot, options: dict[str, Any]) -> np.ndarray:
    """Queue measure: the pooled model's dependence share for every case (larger = more)."""
    return dependence(snap, options.get("model", "pooled")).share


def rests_on(snap: Snapshot, what: str, model: str = "pooled") -> np.ndarray:
    """Boolean per case: neutralising the group (``"group"``) or the group and its proxies
    (``"proxies"``) flips the decision under the operative lens."""
    dep = dependence(snap, model)
    if what == "group":
        return dep.rests_on_group
    if what == "proxies":
        return dep.rests_on_proxies
    raise ValueError(f"rests_on: unknown part '{what}' (group or proxies)")


def dependence_by_group(
    snap: Snapshot, model: str = "pooled", lens: str | None = None
) -> list[dict[str, Any]]:
    """Per group level and overall: mean group part, proxy part and dependence (log-odds), the
    shares of cases that rest on the group and on the group or its proxies, and the shares
    whose verdict is uncertain (see :func:`rests_on_uncertainty`)."""
    dep = dependence(snap, model, lens)
    unc = rests_on_uncertainty(snap, dep)
    codes = np.asarray(snap.group_codes)
    out: list[dict[str, Any]] = []
    for _, label, sel in group_slices(codes, snap.group_levels):
        n = int(sel.sum())
        out.append(
            {
                "group": label,
                "cases": n,
                "mean_group_part": float(dep.group_part[sel].mean()),
                "mean_proxy_part": float(dep.proxy_part[sel].mean()),
                "mean_dependence": float(dep.dependence[sel].mean()),
                "mean_share": float(dep.share[sel].mean()),
                "rests_on_group": float(dep.rests_on_group[sel].mean()),
                "rests_on_proxies": float(dep.rests_on_proxies[sel].mean()),
                "mean_group_part_se": float(unc.group_se[sel].mean()),
                "rests_on_group_uncertain": float(
                    (dep.rests_on_group[sel] & unc.group_uncertain[sel]).mean()
                ),
                "rests_on_proxies_uncertain": float(
                    (dep.rests_on_proxies[sel] & unc.proxies_uncertain[sel]).mean()
                ),
            }
        )
    return out


@dataclass(frozen=True)
class RestsOnUncertainty:
    """Standard errors of the group part and of the group + proxy part, per case, and whether
    each rests-on verdict could flip within its interval."""

    group_se: np.ndarray  # se of the group part (log-odds)
    dependence_se: np.ndarray  # se of group part + proxy part
    z: float  # normal quantile of the interval level
    group_uncertain: np.ndarray  # margin − group part ± z·se straddles 0
    proxies_uncertain: np.ndarray  # margin − dependence ± z·se straddles 0


def rests_on_uncertainty(
    snap: Snapshot, dep: Dependence, level: float = 0.95
) -> RestsOnUncertainty:
    """How sure each rests-on verdict is, from the uncertainty of the weights it rests on.

    The group part of case i is dᵢᵀw_G, dᵢ = x_i − E[x] on the group's columns; its standard
    error is √(dᵢᵀ Σ_G dᵢ) with Σ the inverse penalised Hessian of the fitted row that scored
    the case (the same matrix as the bands), and likewise for the group and proxy columns
    together. The case's own margin is what the model decided and is held fixed. A verdict is
    *uncertain* when the neutralised margin's interval, (margin − part) ± z·se, contains 0:
    within the weights' uncertainty the decision could go either way once the part is removed.

    References
    ----------
    A. Gelman et al., "Bayesian Data Analysis", 3rd ed., 2013, §4.1 (the normal approximation
    at the mode, whose covariance is the inverse Hessian of the penalised log-likelihood).
    """
    from scipy.linalg import solve_triangular
    from scipy.stats import norm

    from closecall.analysis.fitted_rows import row_cholesky, row_mask

    z = float(norm.ppf(0.5 + level / 2.0))
    n = len(dep.rows)
    gse = np.zeros(n)
    dse = np.zeros(n)
    _, row_of_case = snap.weights(dep.model)
    rc = np.asarray(row_of_case)[dep.rows]
    src = snap.meta["column_source"]
    role = dict(zip(dep.features, dep.roles, strict=True))
    is_group = np.array([role[s] == "group" for s in src])
    is_dep = np.array([role[s] in ("group", "proxy") for s in src])
    mu = history_means(snap)
    X = snap.X
    for r in np.unique(rc):  # fitted rows (a handful), not cases
        mask = row_mask(snap, dep.model, int(r))
        if not (mask & is_dep).any():
            continue  # this row has no group or proxy weight: nothing uncertain to carry
        chol = row_cholesky(snap, dep.model, int(r))
        cols = np.flatnonzero(mask)
        pos = np.flatnonzero(rc == r)
        for start in range(0, len(pos), BLOCK_ROWS):
            chunk = pos[start : start + BLOCK_ROWS]
            d = np.asarray(X[dep.rows[chunk]], dtype=float)[:, cols] - mu[cols]
            for which, out in ((is_group[cols], gse), (is_dep[cols], dse)):
                v = np.zeros((len(cols) + 1, len(chunk)))
                v[1:] = (d * which).T
                zz = solve_triangular(chol, v, lower=True, check_finite=False)
                out[chunk] = np.sqrt(np.einsum("ij,ij->j", zz, zz))
    ng = dep.margin_group_neutral
    nn = dep.margin_neutral
    return RestsOnUncertainty(
        group_se=gse,
        dependence_se=dse,
        z=z,
        group_uncertain=np.asarray((ng - z * gse < 0) & (ng + z * gse > 0)),
        proxies_uncertain=np.asarray((nn - z * dse < 0) & (nn + z * dse > 0)),
    )
