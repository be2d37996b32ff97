"""Bands: how far a case's margin can move across models that fit the history (almost) as well.

Let f(w) be the penalised total negative log-likelihood of a fitted row (sum of log-losses over
its training cases + λ/2 |β|²), ŵ its minimiser and H = ∇²f(ŵ). To second order, the models
within ε of the best form the ellipsoid (w − ŵ)ᵀH(w − ŵ) ≤ 2ε, and over it the margin of a
case with x̃ = [1, x] ranges over

    margin ± sqrt(2ε · x̃ᵀH⁻¹x̃).

One closed form, two readings:

- *uncertainty band*: ε = χ²₁(0.95)/2 = 1.92 (absolute). Then sqrt(2ε) = 1.96 and the band is
  the pointwise 95 % Wald interval of the margin — what resampling the history would move.
- *equally-good band*: ε = ε_rel · f(ŵ), a share of the best total loss (default 1 %). It holds
  the models an analyst could not tell apart by their fit, whatever the data size — what an
  equally accurate but different model would decide.

A case is *ambiguous* when its band straddles zero. Its *flip epsilon* ε* = margin² / (2 f(ŵ)
x̃ᵀH⁻¹x̃) is the smallest relative ε at which it becomes ambiguous, so the ambiguity at any ε
is the share of cases with ε* ≤ ε (the ε curve costs nothing extra).

*Ambiguity* (Marx, Calmon & Ustun 2020) is the share of cases some model of the set decides
differently; *discrepancy* the largest share that one single model of the set decides
differently. Ambiguity is exact here (within the quadratic approximation); discrepancy is a
lower bound found by searching directions on the ellipsoid's surface (each ambiguous case's
own flipping direction and pooled directions per group and sign, refined once); ambiguity is
its upper bound. With cross-fitting each fold's row has its own set; one "model" of the set is
one choice per row, so the per-row maxima add up.

``exact_band`` solves the convex problem max / min x̃ᵀw subject to f(w) ≤ f(ŵ) + ε for one
case through its Lagrangian: for a tilt τ ≥ 0, w(τ) = argmin f(w) ∓ τ x̃ᵀw, and τ is found by
root search so that f(w(τ)) = f(ŵ) + ε. For small ε it agrees with the closed form.

References
----------
Marx, Calmon, Ustun, "Predictive multiplicity in classification", ICML 2020.
Semenova, Rudin, Parr, "On the existence of simpler machine learning models", FAccT 2022 (the
Rashomon set as a loss level set).
Pawitan, "In all likelihood", Oxford University Press 2001, ch. 2–3 (likelihood intervals;
quadratic approximation and the Wald interval).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.linalg import cho_solve, solve_triangular
from scipy.special import gammaincinv
from scipy.special import logit as logit_fn

from closecall.analysis.fitted_rows import (
    fitted_row,
    penalised_objective,
    row_cholesky,
    tilde,
)
from closecall.analysis.groups import group_slices
from closecall.core.errors import UserError
from closecall.core.numbers import check_number
from closecall.setup.config import EPSILON_MAX, MultiplicityConfig
from closecall.suite.snapshot import Snapshot

# χ²₁ 95 % quantile / 2 = 1.9207: the 95 % Wald band (chi2.ppf(0.95, 1) is 2·gammaincinv(½, 0.95),
# written so; scipy.stats would cost every `closecall queue` a second to import)
UNCERTAINTY_EPSILON = float(2.0 * gammaincinv(0.5, 0.95) / 2.0)
DEFAULT_EPSILON = MultiplicityConfig().epsilon
EPSILON_CURVE = (0.0005, 0.001, 0.002, 0.005, 0.01, 0.02, 0.05, 0.1)
BLOCK_ROWS = 50_000
MAX_CASE_DIRECTIONS = 64
MAX_LOG_TILT = 20.0  # give up looking for an edge e^20 times beyond the quadratic guess


def half_width(quad: np.ndarray, slack: np.ndarray | float) -> np.ndarray:
    """sqrt(2 · slack · x̃ᵀH⁻¹x̃): how far the margin moves within the slack."""
    return np.sqrt(2.0 * np.asarray(slack) * np.asarray(quad))


def _weighted(snap: Snapshot, model: str) -> None:
    W, _ = snap.weights(model)
    if len(W) == 0:
        raise UserError(
            f"model '{model}' has imported scores only: it has no likelihood to build a band on",
            "use a fitted model such as pooled",
        )


@dataclass
class Bands:
    """Both bands of every case under one model and lens."""

    model: str
    lens: str
    epsilon: float  # relative epsilon of the equally-good band
    margin: np.ndarray
    quad: np.ndarray  # x̃ᵀH⁻¹x̃
    best_objective: np.ndarray  # f(ŵ) of the row that scored each case
    uncertainty: np.ndarray  # half-width at ε = 1.92
    equally_good: np.ndarray  # half-width at ε = epsilon · f(ŵ)

    @property
    def slack(self) -> np.ndarray:
        return np.asarray(self.epsilon * self.best_objective)

    @property
    def ambiguous(self) -> np.ndarray:
        """The equally-good band straddles zero."""
        return np.asarray(np.abs(self.margin) <= self.equally_good)

    @property
    def uncertain(self) -> np.ndarray:
        """The 95 % uncertainty band straddles zero."""
        return np.asarray(np.abs(self.margin) <= self.uncertainty)

    @property
    def flip_epsilon(self) -> np.ndarray:
        """Smallest relative ε whose equally-good band reaches zero."""
        denom = 2.0 * self.best_objective * self.quad
        return np.divide(
            self.margin**2, denom, out=np.full_like(self.margin, np.inf), where=denom > 0
        )

    @property
    def reach(self) -> np.ndarray:
        """h / (h + |margin|) for the equally-good half-width h: above 0.5 = ambiguous,
        1 = on the threshold. The queue's ambiguity measure."""
        h = self.equally_good
        total = h + np.abs(self.margin)
        return np.divide(h, total, out=np.ones_like(h), where=total > 0)


def bands(
    snap: Snapshot,
    model: str = "pooled",
    epsilon: float = DEFAULT_EPSILON,
    lens: str | None = None,
) -> Bands:
    """Uncertainty and equally-good bands for every case (vectorised, from stored x̃ᵀH⁻¹x̃)."""
    _weighted(snap, model)
    check_number("epsilon", epsilon, 0, EPSILON_MAX, low_open=True, example="0.002")
    _, row_of_case = snap.weights(model)
    best = np.asarray(snap.objective(model), dtype=float)[np.asarray(row_of_case)]
    quad = np.asarray(snap.quad(model), dtype=float)
    margin = np.asarray(snap.margins(model, lens), dtype=float)
    return Bands(
        model=model,
        lens=snap.lens(lens).name,
        epsilon=float(epsilon),
        margin=margin,
        quad=quad,
        best_objective=best,
        uncertainty=half_width(quad, UNCERTAINTY_EPSILON),
        equally_good=half_width(quad, epsilon * best),
    )


def ambiguity_measure(snap: Snapshot, options: dict[str, Any]) -> np.ndarray:
    """Queue measure: the equally-good band's reach h/(h+|margin|) of the pooled model."""
    return bands(snap, options.get("model", "pooled"), _epsilon_from(options)).reach


def ambiguous_cases(snap: Snapshot, options: dict[str, Any]) -> np.ndarray:
    """Queue filter: the pooled model's equally-good band straddles zero."""
    return bands(snap, options.get("model", "pooled"), _epsilon_from(options)).ambiguous


def _epsilon_from(options: dict[str, Any]) -> float:
    if options.get("epsilon") is not None:
        return float(options["epsilon"])
    config = options.get("config")
    if config is not None:
        return float(config.multiplicity.epsilon)
    return DEFAULT_EPSILON


# --------------------------------------------------------------------------- per group


def _z_block(snap: Snapshot, model: str, row: int, cases: np.ndarray) -> np.ndarray:
    """z = L⁻¹x̃ for the given cases (rows of the result), so |z|² = x̃ᵀH⁻¹x̃."""
    fr = fitted_row(snap, model, row)
    L = row_cholesky(snap, model, row)
    Xt = tilde(np.asarray(snap.X[cases], dtype=float), fr.mask)
    Z: np.ndarray = solve_triangular(L, Xt.T, lower=True, check_finite=False).T
    return Z


def _flip_counts(
    margin: np.ndarray, Z: np.ndarray, scale: np.ndarray, V: np.ndarray, groups: np.ndarray, G: int
) -> np.ndarray:
    """(G + 1, c) how many cases each candidate direction flips, per group and overall."""
    counts = np.zeros((G + 1, V.shape[1]))
    for start in range(0, len(margin), BLOCK_ROWS):
        s = slice(start, start + BLOCK_ROWS)
        moved = margin[s, None] + scale[s, None] * (Z[s] @ V)
        flips = (moved > 0) != (margin[s, None] > 0)
        for g in range(G):
            counts[g] += flips[groups[s] == g].sum(axis=0)
        counts[G] += flips.sum(axis=0)
    return counts


def _candidates(
    margin: np.ndarray,
    Zn: np.ndarray,
    amb: np.ndarray,
    groups: np.ndarray,
    G: int,
    rng: np.random.Generator,
) -> np.ndarray:
    """Unit directions (k × c) worth trying: pooled pushes per group and sign, and single cases."""
    push = -np.sign(margin)[:, None] * Zn  # each case's own flipping direction
    cols: list[np.ndarray] = []
    for g in [*range(G), -1]:
        in_g = amb if g < 0 else amb & (groups == g)
        for side in (margin > 0, margin <= 0, np.ones_like(amb)):
            sel = in_g & side
            if sel.any():
                cols.append(push[sel].sum(axis=0))
    idx = np.flatnonzero(amb)
    if len(idx) > MAX_CASE_DIRECTIONS:
        idx = rng.choice(idx, MAX_CASE_DIRECTIONS, replace=False)
    cols.extend(push[i] for i in idx)
    if not cols:
        return np.zeros((Zn.shape[1], 0))
    V = np.column_stack(cols)
    norms = np.linalg.norm(V, axis=0)
    return np.asarray(V[:, norms > 0] / norms[norms > 0])


def discrepancy_counts(
    snap: Snapshot, model: str, epsilon: float, lens: str | None = None, seed: int = 0
) -> np.ndarray:
    """(G + 1,) the most cases one model of the equally-good set flips, per group and overall
    (a lower bound found by direction search, see the module notes)."""
    b = bands(snap, model, epsilon, lens)
    _, row_of_case = snap.weights(model)
    rc = np.asarray(row_of_case)
    codes = np.asarray(snap.group_codes)
    G = len(snap.group_levels)
    rng = np.random.default_rng(seed)
    total = np.zeros(G + 1)
    amb_all = b.ambiguous
    for r in np.unique(rc):
        cases = np.flatnonzero(rc == r)
        amb = amb_all[cases]
        if not amb.any():
            continue
        Z = _z_block(snap, model, int(r), cases)
        norms = np.linalg.norm(Z, axis=1)
        Zn = Z / np.where(norms > 0, norms, 1.0)[:, None]
        scale = np.sqrt(2.0 * epsilon * b.best_objective[cases])  # shift = scale · zᵀv
        margin = b.margin[cases]
        groups = codes[cases]
        V = _candidates(margin, Zn, amb, groups, G, rng)
        counts = _flip_counts(margin, Z, scale, V, groups, G)
        # refine once: pool the flipping directions of the cases the best candidate flips
        push = -np.sign(margin)[:, None] * Zn
        refined: list[np.ndarray] = []
        for gi in range(G + 1):
            v = V[:, int(np.argmax(counts[gi]))]
            flipped = (margin + scale * (Z @ v) > 0) != (margin > 0)
            if gi < G:
                flipped &= groups == gi
            d = push[flipped].sum(axis=0)
            if np.linalg.norm(d) > 0:
                refined.append(d / np.linalg.norm(d))
        if refined:
            more = _flip_counts(margin, Z, scale, np.column_stack(refined), groups, G)
            counts = np.hstack([counts, more])
        total += counts.max(axis=1)
    return total


def ambiguity_by_group(
    snap: Snapshot,
    model: str = "pooled",
    epsilon: float = DEFAULT_EPSILON,
    lens: str | None = None,
    seed: int = 0,
) -> list[dict[str, Any]]:
    """Per group and overall: cases, uncertain share (95 % band straddles zero), ambiguity and
    discrepancy of the equally-good set, and median band half-widths."""
    b = bands(snap, model, epsilon, lens)
    codes = np.asarray(snap.group_codes)
    disc = discrepancy_counts(snap, model, epsilon, lens, seed)
    out: list[dict[str, Any]] = []
    for gi, label, sel in group_slices(codes, snap.group_levels):
        n = int(sel.sum())
        out.append(
            {
                "group": label,
                "cases": n,
                "uncertain": float(b.uncertain[sel].mean()),
                "ambiguity": float(b.ambiguous[sel].mean()),
                "discrepancy_at_least": float(disc[gi] / n),
                "median_uncertainty_half_width": float(np.median(b.uncertainty[sel])),
                "median_equally_good_half_width": float(np.median(b.equally_good[sel])),
            }
        )
    return out


def epsilon_curve(
    snap: Snapshot,
    model: str = "pooled",
    epsilons: tuple[float, ...] = EPSILON_CURVE,
    lens: str | None = None,
) -> list[dict[str, Any]]:
    """Ambiguity per group and overall at each relative ε (from each case's flip epsilon)."""
    b = bands(snap, model, epsilons[0], lens)
    star = b.flip_epsilon
    codes = np.asarray(snap.group_codes)
    out: list[dict[str, Any]] = []
    for eps in epsilons:
        row: dict[str, Any] = {"epsilon": float(eps)}
        amb = star <= eps
        row["all"] = float(amb.mean())
        for gi, label in enumerate(snap.group_levels):
            sel = codes == gi
            row[label] = float(amb[sel].mean()) if sel.any() else None
        out.append(row)
    return out


# --------------------------------------------------------------------------- exact band


def _tilted_minimum(
    Xt: np.ndarray,
    y: np.ndarray,
    penalty: float,
    c: np.ndarray,
    tau: float,
    start: np.ndarray,
    tol: float = 1e-11,
) -> np.ndarray:
    """argmin_w f(w) − τ cᵀw by damped Newton steps (the problem is strictly convex)."""
    w = np.array(start, dtype=float)
    value, grad, hess = penalised_objective(w, Xt, y, penalty)
    value -= tau * float(c @ w)
    grad = grad - tau * c
    for _ in range(100):
        step = cho_solve((np.linalg.cholesky(hess), True), grad)
        decrement = float(grad @ step)
        if decrement / 2.0 <= tol * max(1.0, abs(value)):
            break
        size = 1.0
        while True:  # backtracking on the value only; derivatives once a step is taken
            trial = w - size * step
            f_t = penalised_objective(trial, Xt, y, penalty, derivatives=False)[0]
            f_t -= tau * float(c @ trial)
            if f_t <= value - 0.25 * size * decrement or size < 1e-10:
                break
            size /= 2.0
        w, value = trial, f_t
        _, g_t, hess = penalised_objective(w, Xt, y, penalty)
        grad = g_t - tau * c
    return w


def exact_band(
    study: Any,
    case_id: str,
    epsilon: float | None = None,
    *,
    absolute: bool = False,
    model: str = "pooled",
    lens: str | None = None,
) -> dict[str, Any]:
    """The exact range of a case's margin over {w : f(w) ≤ f(ŵ) + ε}, next to the closed form.

    Parameters
    ----------
    study : an open OpenedStudy (config + snapshot)
    case_id : the case
    epsilon : relative ε (a share of the best total loss); None = the study's configured one.
        With ``absolute=True``, ε is the loss slack itself (1.92 = the 95 % Wald band).
    model : a fitted model (default pooled)
    lens : cost lens name; None = the operative lens

    Returns
    -------
    dict with ``low``/``high`` (exact; ±inf when the set is unbounded that way, which only an
    unpenalised fit of separated data allows), ``closed_low``/``closed_high`` (closed form),
    ``slack`` (absolute ε used), ``epsilon``, ``absolute``, ``margin``, ``best_objective``,
    ``one_outcome`` (the fit's training rows hold one outcome value: its loss has no minimum,
    ``best_objective`` is the infimum 0 and the set is unbounded towards that outcome).
    """
    snap: Snapshot = study.snapshot
    _weighted(snap, model)
    eps = float(study.config.multiplicity.epsilon if epsilon is None else epsilon)
    if absolute:
        check_number("the loss slack", eps, 0, low_open=True, example="1.92")
    else:
        check_number("epsilon", eps, 0, EPSILON_MAX, low_open=True, example="0.002")
    p = _tilt_problem(snap, snap.case_index(case_id), model, lens, eps, absolute)
    m_hat = float(p.c @ p.w_hat) - p.t
    hw = float(np.sqrt(2.0 * p.slack * p.quad))
    with np.errstate(over="ignore", invalid="ignore"):  # far tilts may overflow: handled
        low, high = _edge(p, -1.0), _edge(p, 1.0)
    return {
        "case_id": str(case_id),
        "model": model,
        "epsilon": eps,
        "absolute": absolute,
        "slack": float(p.slack),
        "best_objective": float(p.f_hat),
        "margin": m_hat,
        "low": low,
        "high": high,
        "closed_low": m_hat - hw,
        "closed_high": m_hat + hw,
        "one_outcome": bool(p.toward),
    }


@dataclass(frozen=True)
class _TiltProblem:
    """One case's fitted row, ready for the tilted problems: the design ``Xt`` and outcomes
    ``y`` it was fitted on, the case's row ``c``, the threshold's logit ``t``, the optimum
    ``w_hat`` with its loss ``f_hat`` and Hessian form ``quad`` = c'H⁻¹c, the absolute
    ``slack``, and ``toward`` (±1 when the training rows hold one outcome value, else 0)."""

    Xt: np.ndarray
    y: np.ndarray
    penalty: Any
    c: np.ndarray
    t: float
    w_hat: np.ndarray
    f_hat: float
    quad: float
    slack: float
    toward: float


def _tilt_problem(
    snap: Snapshot, i: int, model: str, lens: str | None, eps: float, absolute: bool
) -> _TiltProblem:
    """Fit the case's row at tilt 0 and set up its equally-good set."""
    _, row_of_case = snap.weights(model)
    r = int(np.asarray(row_of_case)[i])
    fr = fitted_row(snap, model, r)
    hX = np.asarray(snap.hist_X)[fr.train]
    y = np.asarray(snap.hist_y, dtype=float)[fr.train]
    Xt = tilde(hX, fr.mask)
    c = tilde(np.asarray(snap.X[i], dtype=float)[None, :], fr.mask)[0]
    t = float(logit_fn(snap.lens(lens).threshold))
    w_hat = _tilted_minimum(Xt, y, fr.penalty, c, 0.0, fr.active)
    f_hat, _, H = penalised_objective(w_hat, Xt, y, fr.penalty)
    # One outcome value in the fit's training rows (a flagged fit, docs/methods.md §5a): the
    # unpenalised intercept has no finite optimum; the loss falls towards its infimum 0 as the
    # intercept runs to +inf (all favourable) or -inf, and w_hat is only where the solver
    # stopped. The set is then taken about the infimum: unbounded towards the outcome, and a
    # relative slack of 0 leaves only that limit.
    toward = 0.0
    if len(y) and float(y.min()) == float(y.max()):
        toward = 1.0 if float(y[0]) > 0 else -1.0
        f_hat = 0.0
    slack = eps if absolute else eps * f_hat
    chol = np.linalg.cholesky(H)
    quad = float(c @ cho_solve((chol, True), c))
    return _TiltProblem(Xt, y, fr.penalty, c, t, w_hat, f_hat, quad, slack, toward)


def _edge(p: _TiltProblem, sign: float) -> float:
    """The margin at the set's edge in direction sign·x̃; ±inf when it has none.

    The loss grows only linearly far out, so beyond some tilt the tilted problem has no
    minimum; such a tilt counts as "past the edge" (excess = +inf), which keeps the
    excess increasing in the tilt and the search a bisection.
    """
    if p.toward and (sign == p.toward or p.slack <= 0.0):
        return p.toward * np.inf
    last = {"w": p.w_hat}  # warm start from the previous tilt's solution

    def excess(log_tau: float) -> float:
        try:
            w = _tilted_minimum(p.Xt, p.y, p.penalty, sign * p.c, float(np.exp(log_tau)), last["w"])
        except np.linalg.LinAlgError:
            return np.inf
        value = penalised_objective(w, p.Xt, p.y, p.penalty, derivatives=False)[0]
        if not np.isfinite(value):
            return np.inf
        last["w"] = w
        return value - p.f_hat - p.slack

    guess = float(np.log(np.sqrt(2.0 * p.slack / p.quad)))  # the quadratic model's tilt
    bracket = _bracket(excess, guess)
    if bracket is None:
        return sign * np.inf
    from scipy.optimize import brentq

    log_tau = brentq(excess, bracket[0], bracket[1], xtol=1e-7, rtol=1e-9)
    w = _tilted_minimum(p.Xt, p.y, p.penalty, sign * p.c, float(np.exp(log_tau)), last["w"])
    return float(p.c @ w) - p.t


def _bracket(excess: Callable[[float], float], guess: float) -> tuple[float, float] | None:
    """Log-tilts (lo, hi) about ``guess`` with excess(lo) < 0 ≤ excess(hi), hi's finite;
    None when the set has no edge that way."""
    step = 0.05  # widen a tight bracket around the guess until the sign changes
    lo_ = hi_ = guess
    e_hi = excess(guess)
    if e_hi < 0:
        while e_hi < 0:
            lo_, hi_ = hi_, hi_ + step
            e_hi = excess(hi_)
            step *= 2.0
            if hi_ > guess + MAX_LOG_TILT:
                return None
    else:
        while True:
            lo_ = hi_ - step
            e_lo = excess(lo_)
            if e_lo < 0:
                break
            hi_, e_hi = lo_, e_lo
            step *= 2.0
    while not np.isfinite(e_hi):  # bisect until the upper end has a minimum
        if hi_ - lo_ < 1e-9:
            # the loss stays within the slack however far w moves: an unpenalised fit of
            # (quasi-)separated data has such directions
            return None
        mid = (lo_ + hi_) / 2.0
        e_mid = excess(mid)
        if e_mid < 0:
            lo_ = mid
        else:
            hi_, e_hi = mid, e_mid
    return lo_, hi_
