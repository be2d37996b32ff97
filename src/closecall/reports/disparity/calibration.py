"""Calibration by group of every model of the suite, on held-out scores of the history.

The cost-lens threshold assumes calibrated probabilities: a case is decided favourably when
its predicted p exceeds t. If for one group the model's probabilities are too extreme or too
timid, the same t acts as a different threshold for that group. Per model and group, over the
history's out-of-fold log-odds η (each case scored by a model not trained on it):

- **calibration intercept** a₀ ("calibration in the large"): logit P(y) = a₀ + η, η as an
  offset; 0 when predictions are right on average;
- **calibration slope** b with its intercept a: logit P(y) = a + b·η; b = 1 when predictions
  are neither too extreme (b < 1) nor too timid (b > 1);
- **reliability curve**: equal-count bins of the predicted probability, with the observed rate
  (Wilson interval) and count in each bin;
- **effective threshold**: the model probability p* whose recalibrated probability equals the
  lens threshold t, from a + b·logit(p*) = logit(t); and the recalibrated probability
  expit(a + b·logit t) of a case sitting exactly at the model's threshold. Intervals by the
  delta method from the covariance of (a, b).

Both fits are maximum likelihood by Newton's method (two parameters, vectorised over the
cases; checked against statsmodels' GLM in the tests), with Wald intervals.

References
----------
D. R. Cox, "Two further applications of a model for binary regression", Biometrika 45 (1958)
562-565 (logistic recalibration). B. Van Calster, D. Nieboer, Y. Vergouwe, B. De Cock,
M. J. Pencina and E. W. Steyerberg, "A calibration hierarchy for risk models was defined: from
utopia to empirical data", Journal of Clinical Epidemiology 74 (2016) 167-176.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import stats
from scipy.special import expit, logit

from closecall.reports.disparity.intervals import wilson_interval, z_value
from closecall.reports.disparity.power import Detectable, detectable_shift

BINS = 10
MAX_ITER = 50


@dataclass(frozen=True)
class ReliabilityBin:
    """Cases of one group whose predicted probability falls in one equal-count bin."""

    p_low: float
    p_high: float
    cases: int
    mean_predicted: float
    observed: float
    low: float
    high: float


@dataclass(frozen=True)
class EffectiveThreshold:
    """What a lens threshold means for one group once its scores are recalibrated."""

    lens: str
    threshold: float  # t of the lens
    effective: float  # model probability p* with recalibrated probability t
    effective_low: float
    effective_high: float
    at_threshold: float  # recalibrated probability of a case at the model's threshold
    at_threshold_low: float
    at_threshold_high: float


@dataclass(frozen=True)
class GroupCalibration:
    """Calibration of one model for one group (or for every case: group "all")."""

    model: str
    group: str
    cases: int
    events: int  # favourable outcomes
    mean_predicted: float
    observed: float
    intercept: float  # a₀, with η as offset
    intercept_low: float
    intercept_high: float
    intercept_p: float  # Wald test of a₀ = 0
    slope: float  # b
    slope_low: float
    slope_high: float
    slope_p: float  # Wald test of b = 1
    slope_detectable: Detectable
    bins: tuple[ReliabilityBin, ...]
    thresholds: tuple[EffectiveThreshold, ...]
    problems: tuple[str, ...]  # "too extreme" (slope < 1), "too timid", "too high/low on average"
    verdict: str
    note: str | None


@dataclass(frozen=True)
class CalibrationReport:
    """Calibration by group for every model with held-out scores."""

    rows: tuple[GroupCalibration, ...]
    models: tuple[str, ...]
    source: str
    level: float
    notes: tuple[str, ...]


def _newton(
    eta: NDArray[np.float64], y: NDArray[np.float64], with_slope: bool
) -> tuple[NDArray[np.float64], NDArray[np.float64], bool]:
    """ML fit of logit P(y) = a + η (offset) or a + b·η; returns estimate, covariance, ok."""
    theta = np.array([0.0, 1.0])
    for _ in range(MAX_ITER):
        lin = theta[0] + theta[1] * eta
        p = expit(lin)
        r = y - p
        w = p * (1.0 - p)
        if with_slope:
            g = np.array([r.sum(), r @ eta])
            sw, swe, swee = w.sum(), w @ eta, w @ (eta * eta)
            H = np.array([[sw, swe], [swe, swee]])
            try:
                step = np.linalg.solve(H, g)
            except np.linalg.LinAlgError:
                return theta, np.full((2, 2), np.nan), False
        else:
            H = np.array([[w.sum()]])
            step = np.array([r.sum() / H[0, 0], 0.0]) if H[0, 0] > 0 else np.array([0.0, 0.0])
        theta = theta + step
        if not np.all(np.isfinite(theta)):
            return theta, np.full((2, 2), np.nan), False
        if np.max(np.abs(step)) < 1e-10:
            break
    else:
        return theta, np.full((2, 2), np.nan), False
    p = expit(theta[0] + theta[1] * eta)
    w = p * (1.0 - p)
    if with_slope:
        H = np.array([[w.sum(), w @ eta], [w @ eta, w @ (eta * eta)]])
        cov = np.linalg.inv(H)
    else:
        cov = np.array([[1.0 / w.sum(), 0.0], [0.0, 0.0]])
    return theta, cov, True


def recalibration(
    eta: NDArray[np.float64], y: NDArray[np.float64]
) -> tuple[float, float, float, float, NDArray[np.float64], bool]:
    """(a₀, se(a₀), a, b, cov(a, b), ok) for held-out log-odds ``eta`` and 0/1 outcomes ``y``."""
    t0, c0, ok0 = _newton(eta, y, with_slope=False)
    t1, c1, ok1 = _newton(eta, y, with_slope=True)
    return float(t0[0]), float(np.sqrt(c0[0, 0])), float(t1[0]), float(t1[1]), c1, ok0 and ok1


def reliability_bins(
    eta: NDArray[np.float64], y: NDArray[np.float64], bins: int, level: float
) -> tuple[ReliabilityBin, ...]:
    """Equal-count bins of the predicted probability with observed rates (Wilson)."""
    if len(eta) == 0:
        return ()
    edges = np.unique(np.quantile(eta, np.linspace(0.0, 1.0, bins + 1)))
    # right-closed bins (a, b], the lowest including its left edge (as pandas.qcut)
    idx = np.clip(np.searchsorted(edges, eta, side="left") - 1, 0, max(len(edges) - 2, 0))
    k = max(len(edges) - 1, 1)
    n = np.bincount(idx, minlength=k)
    ev = np.bincount(idx, weights=y, minlength=k)
    mp = np.bincount(idx, weights=expit(eta), minlength=k)
    lo, hi = wilson_interval(ev, n, level)
    pe = expit(edges) if len(edges) > 1 else np.repeat(expit(edges), 2)
    return tuple(
        ReliabilityBin(
            p_low=float(pe[i]),
            p_high=float(pe[i + 1]),
            cases=int(n[i]),
            mean_predicted=float(mp[i] / n[i]),
            observed=float(ev[i] / n[i]),
            low=float(lo[i]),
            high=float(hi[i]),
        )
        for i in range(k)
        if n[i] > 0
    )


def effective_thresholds(
    a: float, b: float, cov: NDArray[np.float64], lenses: Sequence[tuple[str, float]], z: float
) -> tuple[EffectiveThreshold, ...]:
    """Per lens: p* solving a + b·logit(p*) = logit(t), and expit(a + b·logit t), each with a
    delta-method interval on the logit scale."""
    out = []
    for name, t in lenses:
        lt = float(logit(t))
        x = (lt - a) / b if b != 0 else np.nan
        grad = np.array([-1.0 / b, -(lt - a) / (b * b)]) if b != 0 else np.full(2, np.nan)
        se_x = float(np.sqrt(max(grad @ cov @ grad, 0.0))) if np.all(np.isfinite(cov)) else np.nan
        c = a + b * lt
        gc = np.array([1.0, lt])
        se_c = float(np.sqrt(max(gc @ cov @ gc, 0.0))) if np.all(np.isfinite(cov)) else np.nan
        out.append(
            EffectiveThreshold(
                lens=name,
                threshold=float(t),
                effective=float(expit(x)),
                effective_low=float(expit(x - z * se_x)),
                effective_high=float(expit(x + z * se_x)),
                at_threshold=float(expit(c)),
                at_threshold_low=float(expit(c - z * se_c)),
                at_threshold_high=float(expit(c + z * se_c)),
            )
        )
    return tuple(out)


def _problems(lo0: float, hi0: float, lo: float, hi: float) -> tuple[str, ...]:
    """What the intervals show: slope below or above 1, intercept below or above 0."""
    parts = []
    if np.isfinite(lo) and hi < 1.0:
        parts.append("too extreme")
    elif np.isfinite(lo) and lo > 1.0:
        parts.append("too timid")
    if np.isfinite(lo0) and hi0 < 0.0:
        parts.append("too high on average")
    elif np.isfinite(lo0) and lo0 > 0.0:
        parts.append("too low on average")
    return tuple(parts)


def _verdict(problems: tuple[str, ...]) -> str:
    if not problems:
        return "no miscalibration shown (read the intervals: it may be too small to detect)"
    return "miscalibrated: " + ", ".join(problems)


def calibration_by_group(
    held_out: Mapping[str, NDArray[np.float64]],
    y: NDArray[np.integer],
    group_codes: NDArray[np.integer],
    levels: Sequence[str],
    lenses: Sequence[tuple[str, float]],
    *,
    level: float = 0.95,
    bins: int = BINS,
    source: str = "out-of-fold scores of the history",
) -> CalibrationReport:
    """Calibration intercept, slope, reliability curve and effective thresholds per model and
    group (and over every case, group "all").

    Parameters
    ----------
    held_out
        Model name → held-out log-odds for every history case (NaN where there is none).
    y
        1 favourable, 0 unfavourable outcome for every history case.
    group_codes, levels
        Each history case's group as an index into ``levels``.
    lenses
        (name, threshold t) of every cost lens.
    level
        Confidence level of the intervals.
    bins
        Equal-count bins of the reliability curve.
    """
    z = z_value(level)
    yy = np.asarray(y, dtype=float)
    codes = np.asarray(group_codes)
    rows: list[GroupCalibration] = []
    notes: list[str] = []
    models: list[str] = []
    for model, raw in held_out.items():
        eta_all = np.asarray(raw, dtype=float)
        valid = np.isfinite(eta_all)
        if not valid.any():
            notes.append(f"model {model}: no held-out scores of the history; not calibrated")
            continue
        models.append(model)
        subsets = [*((str(lv), codes == i) for i, lv in enumerate(levels)), ("all", None)]
        for name, sel in subsets:  # per group (a handful), vectorised within
            use = valid if sel is None else valid & sel
            rows.append(
                _group_calibration(model, name, eta_all[use], yy[use], lenses, level, bins, z)
            )
    return CalibrationReport(tuple(rows), tuple(models), source, level, tuple(notes))


def _group_calibration(
    model: str,
    group: str,
    eta: NDArray[np.float64],
    y: NDArray[np.float64],
    lenses: Sequence[tuple[str, float]],
    level: float,
    bins: int,
    z: float,
) -> GroupCalibration:
    """One model's calibration on one group's cases (not estimated when it cannot be)."""
    n, ev = len(eta), int(y.sum())
    if n == 0 or ev in (0, n):
        return _empty(model, group, n, ev, "no cases, or every outcome the same")
    a0, se0, a, b, cov, ok = recalibration(eta, y)
    if not ok:
        return _empty(model, group, n, ev, "the recalibration fit did not converge")
    se_b = float(np.sqrt(cov[1, 1]))
    problems = _problems(a0 - z * se0, a0 + z * se0, b - z * se_b, b + z * se_b)
    return GroupCalibration(
        model=model,
        group=group,
        cases=n,
        events=ev,
        mean_predicted=float(expit(eta).mean()),
        observed=float(ev / n),
        intercept=a0,
        intercept_low=a0 - z * se0,
        intercept_high=a0 + z * se0,
        intercept_p=float(2 * stats.norm.sf(abs(a0 / se0))),
        slope=b,
        slope_low=b - z * se_b,
        slope_high=b + z * se_b,
        slope_p=float(2 * stats.norm.sf(abs((b - 1.0) / se_b))),
        slope_detectable=detectable_shift(se_b, 1.0, "calibration slope"),
        bins=reliability_bins(eta, y, bins, level),
        thresholds=effective_thresholds(a, b, cov, lenses, z),
        problems=problems,
        verdict=_verdict(problems),
        note=_rarer_outcome_note(n, ev),
    )


def _rarer_outcome_note(n: int, events: int) -> str | None:
    """A warning when the rarer outcome has fewer than 100 cases (None otherwise)."""
    rarer = min(events, n - events)
    if rarer >= 100:
        return None
    return (
        f"only {rarer} cases in the rarer outcome: calibration estimates "
        "are rough (common practice asks for at least 100)"
    )


def _empty(model: str, group: str, n: int, ev: int, why: str) -> GroupCalibration:
    nan = np.nan
    return GroupCalibration(
        model=model,
        group=group,
        cases=n,
        events=ev,
        mean_predicted=nan,
        observed=ev / n if n else nan,
        intercept=nan,
        intercept_low=nan,
        intercept_high=nan,
        intercept_p=nan,
        slope=nan,
        slope_low=nan,
        slope_high=nan,
        slope_p=nan,
        slope_detectable=detectable_shift(nan, 1.0, "calibration slope"),
        bins=(),
        thresholds=(),
        problems=(),
        verdict="not estimated",
        note=why,
    )
