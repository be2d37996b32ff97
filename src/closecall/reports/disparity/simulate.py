"""Seeded simulation of reviewers' actions, with an optional injected group bias.

Used by the demo (to record realistic reviews in a real ledger) and by the tests (to check that
a known bias is recovered). Overrides follow a logistic model in the margin:

    logit P(override to unfavourable | model favourable) = a + b·margin + log(bias)·[biased group]
    logit P(override to favourable | model unfavourable) = a + b·|margin|

so ``bias`` is exactly the odds ratio the conditional regression should recover.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from closecall.core.vocabulary import DEFER, OVERRIDE_FAVOURABLE, OVERRIDE_UNFAVOURABLE, UPHOLD


def _expit(x: NDArray[np.float64]) -> NDArray[np.float64]:
    return np.asarray(1.0 / (1.0 + np.exp(-x)), dtype=float)


def simulate_actions(
    margin: ArrayLike,
    group: ArrayLike,
    rng: np.random.Generator,
    *,
    biased_group: str | None = None,
    bias: float = 1.0,
    base_rate: float = 0.2,
    slope: float = -2.0,
    defer_rate: float = 0.04,
) -> NDArray[np.str_]:
    """Draw one reviewer action per case.

    Parameters
    ----------
    margin
        Reference-model margin of each case (log-odds); > 0 means decided favourably.
    group
        Group label of each case.
    rng
        Random generator (seeded by the caller).
    biased_group, bias
        Cases of ``biased_group`` that the model decided favourably are overridden to
        unfavourable with ``bias`` times the odds of other groups at the same margin.
    base_rate
        Override probability at margin 0.
    slope
        Change in log-odds of an override per unit of distance from the threshold.
    defer_rate
        Probability that a review is a deferral.
    """
    if bias <= 0:
        raise ValueError("bias is an odds ratio and must be positive")
    m = np.asarray(margin, dtype=float)
    g = np.asarray(group).astype(str)
    a = np.log(base_rate / (1.0 - base_rate))
    fav = m > 0
    shift = np.where(g == biased_group, np.log(bias), 0.0) if biased_group is not None else 0.0
    p_unf = _expit(a + slope * m + shift)
    p_fav = _expit(a + slope * np.abs(m))
    u = rng.random(m.shape)
    d = rng.random(m.shape)
    out = np.full(m.shape, UPHOLD, dtype=object)
    out[fav & (u < p_unf)] = OVERRIDE_UNFAVOURABLE
    out[~fav & (u < p_fav)] = OVERRIDE_FAVOURABLE
    out[d < defer_rate] = DEFER
    return np.asarray(out, dtype=str)
