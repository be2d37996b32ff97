"""Coefficients on the data's own scale, for reading and for textbook comparisons.

The models are fitted on standardised numeric features; a weight w on a standardised feature
is w / sd per unit of the raw feature, and the intercept absorbs the centring.
"""

from __future__ import annotations

import numpy as np

from closecall.suite.snapshot import Snapshot


def raw_coefficients(snap: Snapshot, model: str, row: int = 0) -> dict[str, float]:
    """Whole-history coefficients of a model in raw units, keyed by design column.

    ``row`` picks the group for the split model (index into snap.group_levels).
    """
    full = np.asarray(snap.arrays[f"fullW__{model}"])
    if len(full) == 0:
        raise ValueError(f"model '{model}' has no fitted coefficients (imported scores)")
    w = full[row]
    intercept = float(w[0])
    coef = np.array(w[1:], dtype=float)
    out: dict[str, float] = {}
    names = snap.columns
    i = 0
    for f in snap.encoder.features:
        for name in f.design_names():
            if f.kind == "numeric" and name == f.name:
                out[name] = coef[i] / f.sd
                intercept -= coef[i] * f.mean / f.sd
            else:
                out[name] = float(coef[i])
            i += 1
    assert i == len(names)
    return {"(intercept)": intercept, **out}
