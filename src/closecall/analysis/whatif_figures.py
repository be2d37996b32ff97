"""The figures of a what-if: decisions changed by group and direction, favourable rates and
adverse impact ratios per group with intervals, held-out error rates per group.

For a policy compared with a baseline (the decision in force, or a second policy), over the
cases under review:

- **changed**: cases the two decide differently, per group and direction (to favourable, to
  unfavourable), with the share of the group's cases and its Wilson interval;
- **favourable rate** of each group under each of the two, with Wilson intervals, and the
  **adverse impact ratio** (AIR): the group's rate over the most favoured group's rate, with
  Katz's log interval for a ratio of two independent proportions (Koopman's score interval
  where a count is 0) — the method of the disparity report (docs/disparity.md) — and the
  four-fifths flag;
- on the history's held-out scores: the **false-favourable rate** (decided favourably among
  cases whose recorded outcome was unfavourable) and the **false-unfavourable rate** (decided
  unfavourably among cases whose outcome was favourable) per group, with Wilson intervals.

The counts of changed decisions are exact for these cases; the intervals read the cases
under review as a sample of the cases the policy would meet.

References
----------
E. B. Wilson, JASA 22 (1927) 209-212. D. Katz et al., Biometrics 34 (1978) 469-474.
P. A. R. Koopman, Biometrics 40 (1984) 513-517. Uniform Guidelines on Employee Selection
Procedures, 29 CFR 1607.4(D) (four-fifths rule).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from closecall.analysis.whatif import Policy, PolicyScores, policy_scores
from closecall.reports.disparity.intervals import proportion, wilson_interval
from closecall.reports.disparity.rates import FOUR_FIFTHS, air_intervals

if TYPE_CHECKING:
    from closecall.suite.opening import OpenedStudy


@dataclass(frozen=True)
class GroupChange:
    """How many of one group's decisions the policy changes, and in which direction."""

    group: str
    cases: int
    to_favourable: int
    to_unfavourable: int
    changed: int
    share: float  # changed / cases
    share_low: float  # Wilson interval
    share_high: float


@dataclass(frozen=True)
class GroupRate:
    """One group's favourable rate under one policy, and its adverse impact ratio."""

    group: str
    cases: int
    favourable: int
    rate: float
    low: float  # Wilson interval
    high: float
    air: float  # rate / the most favoured group's rate (1 for that group)
    air_low: float  # Katz log (Koopman score where a count is 0); NaN for the reference
    air_high: float
    air_method: str  # katz-log, koopman-score, reference or none
    below_four_fifths: bool


@dataclass(frozen=True)
class GroupErrorRate:
    """One group's held-out error rates under one policy (Wilson intervals)."""

    group: str
    unfavourable_outcomes: int
    false_favourable: int
    false_favourable_rate: float
    false_favourable_low: float
    false_favourable_high: float
    favourable_outcomes: int
    false_unfavourable: int
    false_unfavourable_rate: float
    false_unfavourable_low: float
    false_unfavourable_high: float


@dataclass(frozen=True)
class PolicyFigures:
    """Everything measured for one policy."""

    policy: str  # text form
    label: str  # in words
    rates: tuple[GroupRate, ...]
    most_favoured: str
    errors: tuple[GroupErrorRate, ...]  # empty when there are no held-out scores
    errors_source: str
    notes: tuple[str, ...]


@dataclass(frozen=True)
class WhatIfFigures:
    """A policy against a baseline: changed decisions, rates, AIR and error rates."""

    baseline: PolicyFigures
    policy: PolicyFigures
    changes: tuple[GroupChange, ...]
    total: GroupChange  # every group together (group "all")
    rows: np.ndarray  # snapshot rows of the changed cases
    to_favourable: np.ndarray  # per changed row: True if the change is to favourable
    baseline_margin: np.ndarray  # per changed row
    policy_margin: np.ndarray  # per changed row
    level: float
    notes: tuple[str, ...]


def _change(group: str, n: int, up: int, down: int, level: float) -> GroupChange:
    lo, hi = wilson_interval(up + down, n, level)
    return GroupChange(
        group,
        int(n),
        int(up),
        int(down),
        int(up + down),
        float(proportion(up + down, n)),
        float(lo),
        float(hi),
    )


def _rates(
    fav: np.ndarray, codes: np.ndarray, levels: list[str], level: float
) -> tuple[tuple[GroupRate, ...], str]:
    G = len(levels)
    n = np.bincount(codes, minlength=G)
    k = np.bincount(codes[fav], minlength=G)
    rate = proportion(k, n)
    lo, hi = wilson_interval(k, n, level)
    present = n > 0
    ref = int(np.nanargmax(np.where(present, rate, -1.0)))
    top = rate[ref]
    a_lo, a_hi, how = air_intervals(k, n, ref, level)
    rows = []
    for g in range(G):  # groups, not cases
        air = float(rate[g] / top) if top > 0 and n[g] > 0 else float("nan")
        rows.append(
            GroupRate(
                group=levels[g],
                cases=int(n[g]),
                favourable=int(k[g]),
                rate=float(rate[g]),
                low=float(lo[g]),
                high=float(hi[g]),
                air=air,
                air_low=float(a_lo[g]),
                air_high=float(a_hi[g]),
                air_method=how[g],
                below_four_fifths=bool(air < FOUR_FIFTHS),
            )
        )
    return tuple(rows), levels[ref]


def _errors(
    scores: PolicyScores, y: np.ndarray, codes: np.ndarray, levels: list[str], level: float
) -> tuple[GroupErrorRate, ...]:
    G = len(levels)
    valid = np.isfinite(scores.held_out)
    if not valid.any():
        return ()
    yy = np.asarray(y) == 1
    fav = valid & scores.held_out_favourable
    neg = np.bincount(codes[valid & ~yy], minlength=G)
    pos = np.bincount(codes[valid & yy], minlength=G)
    ff = np.bincount(codes[fav & ~yy], minlength=G)
    fu = np.bincount(codes[valid & ~fav & yy], minlength=G)
    ff_lo, ff_hi = wilson_interval(ff, neg, level)
    fu_lo, fu_hi = wilson_interval(fu, pos, level)
    ff_rate, fu_rate = proportion(ff, neg), proportion(fu, pos)
    return tuple(
        GroupErrorRate(
            levels[g],
            int(neg[g]),
            int(ff[g]),
            float(ff_rate[g]),
            float(ff_lo[g]),
            float(ff_hi[g]),
            int(pos[g]),
            int(fu[g]),
            float(fu_rate[g]),
            float(fu_lo[g]),
            float(fu_hi[g]),
        )
        for g in range(G)  # groups, not cases
    )


def _figures(study: OpenedStudy, scores: PolicyScores, level: float) -> PolicyFigures:
    snap = study.snapshot
    levels = snap.group_levels
    codes = np.asarray(snap.group_codes, dtype=np.int64)
    rates, top = _rates(scores.favourable, codes, levels, level)
    hist_codes = np.asarray(snap.hist_group_codes, dtype=np.int64)
    errors = _errors(scores, np.asarray(snap.hist_y), hist_codes, levels, level)
    notes = list(scores.notes)
    if not errors and not scores.notes:
        notes.append("no held-out scores of the history for this policy: no error rates")
    return PolicyFigures(
        scores.policy.to_text(),
        scores.label,
        rates,
        top,
        errors,
        scores.held_out_source,
        tuple(notes),
    )


def whatif(
    study: OpenedStudy,
    policy: Policy,
    against: Policy | None = None,
    *,
    level: float = 0.95,
) -> WhatIfFigures:
    """Measure a policy against the baseline (or against a second policy).

    Parameters
    ----------
    study
        The opened study.
    policy
        The policy to weigh.
    against
        The policy it is compared with (None: the baseline, the decision in force).
    level
        Confidence level of every interval.

    Returns
    -------
    WhatIfFigures
        Changed decisions by group and direction, each side's favourable rates and adverse
        impact ratios per group, each side's held-out error rates per group, and the changed
        cases' rows with both margins.
    """
    from closecall.core.numbers import check_number

    level = check_number("level", level, 0, 1, low_open=True, high_open=True, example="0.95")
    snap = study.snapshot
    base = policy_scores(study, against or Policy())
    new = policy_scores(study, policy)
    before, after = base.favourable, new.favourable
    codes = np.asarray(snap.group_codes, dtype=np.int64)
    levels = snap.group_levels
    G = len(levels)
    up_mask = after & ~before
    down_mask = before & ~after
    n = np.bincount(codes, minlength=G)
    up = np.bincount(codes[up_mask], minlength=G)
    down = np.bincount(codes[down_mask], minlength=G)
    changes = tuple(
        _change(levels[g], int(n[g]), int(up[g]), int(down[g]), level) for g in range(G)
    )
    total = _change("all", int(n.sum()), int(up.sum()), int(down.sum()), level)
    rows = np.flatnonzero(up_mask | down_mask)
    notes: list[str] = []
    if base.policy == new.policy:
        notes.append("the policy is the same decision rule as the one it is compared with")
    return WhatIfFigures(
        baseline=_figures(study, base, level),
        policy=_figures(study, new, level),
        changes=changes,
        total=total,
        rows=rows,
        to_favourable=np.asarray(after[rows]),
        baseline_margin=np.asarray(base.margin[rows], dtype=float),
        policy_margin=np.asarray(new.margin[rows], dtype=float),
        level=float(level),
        notes=tuple(notes),
    )


def figures_dict(
    fig: WhatIfFigures, case_ids: np.ndarray, group_labels: np.ndarray
) -> dict[str, Any]:
    """JSON-ready figures (NaN as None); the changed cases listed with both margins."""
    from dataclasses import asdict

    def clean(value: Any) -> Any:
        if isinstance(value, float) and not np.isfinite(value):
            return None if np.isnan(value) else ("inf" if value > 0 else "-inf")
        if isinstance(value, dict):
            return {k: clean(v) for k, v in value.items()}
        if isinstance(value, (list, tuple)):
            return [clean(v) for v in value]
        return value

    def side(p: PolicyFigures) -> dict[str, Any]:
        return dict(clean(asdict(p)))

    rows = fig.rows
    import pandas as pd

    changed = pd.DataFrame(
        {
            "case_id": np.asarray(case_ids)[rows].astype(str),
            "group": np.asarray(group_labels)[rows].astype(str),
            "direction": np.where(fig.to_favourable, "to favourable", "to unfavourable"),
            "baseline_margin": np.asarray(fig.baseline_margin, dtype=float),
            "policy_margin": np.asarray(fig.policy_margin, dtype=float),
        }
    ).to_dict("records")
    return {
        "level": fig.level,
        "baseline": side(fig.baseline),
        "policy": side(fig.policy),
        "changes": [clean(asdict(c)) for c in fig.changes],
        "total": clean(asdict(fig.total)),
        "notes": list(fig.notes),
        "changed_cases": changed,
    }
