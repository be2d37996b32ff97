"""The whole population: what review changed across every case, not only the close calls.

Every case under review in the current snapshot counts. Its **model decision** is the reference
model's under the operative lens; its **final decision** is the reviewer's effective decision
where the case was reviewed and decided, and the model's otherwise (unreviewed and deferred
cases keep the model's decision). Per group: favourable rates of both (Wilson intervals), their
change (bootstrap), and adverse impact ratios against the most favoured group with Katz's log
interval for a ratio of two independent proportions (Koopman's score interval where a count is
0); the change in the lowest ratio gets a bootstrap interval.

References
----------
Uniform Guidelines on Employee Selection Procedures, 29 CFR 1607.4(D). D. Katz et al.,
Biometrics 34 (1978) 469-474. P. A. R. Koopman, Biometrics 40 (1984) 513-517.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from closecall.reports.disparity.intervals import (
    bootstrap_cells,
    percentile_interval,
    proportion,
    wilson_interval,
)
from closecall.reports.disparity.rates import FOUR_FIFTHS, air_intervals, four_fifths_flag


@dataclass(frozen=True)
class PopulationGroup:
    """One group over every case under review."""

    group: str
    cases: int
    reviewed: int
    decided: int
    changed_to_favourable: int
    changed_to_unfavourable: int
    model_favourable: int
    model_rate: float
    model_low: float
    model_high: float
    final_favourable: int
    final_rate: float
    final_low: float
    final_high: float
    change: float
    change_low: float
    change_high: float
    model_air: float
    model_air_low: float  # Katz log (or Koopman score) interval; NaN for the reference
    model_air_high: float
    model_air_method: str
    model_flag: bool
    final_air: float
    final_air_low: float
    final_air_high: float
    final_air_method: str
    final_flag: bool


@dataclass(frozen=True)
class PopulationEffect:
    """Favourable rates and adverse impact ratios over every case, model against final."""

    rows: tuple[PopulationGroup, ...]
    cases: int
    reviewed: int
    decided: int
    model_reference: str
    final_reference: str
    lowest_model_air: float
    lowest_final_air: float
    lowest_air_change: float
    lowest_air_change_low: float
    lowest_air_change_high: float
    level: float
    notes: tuple[str, ...]


def population_effect(
    group_codes: NDArray[np.integer],
    levels: Sequence[str],
    model_favourable: NDArray[np.bool_],
    reviewed_rows: NDArray[np.integer],
    reviewed_decided: NDArray[np.bool_],
    reviewed_final_favourable: NDArray[np.bool_],
    *,
    level: float = 0.95,
    n_boot: int = 2000,
    seed: int = 0,
) -> PopulationEffect:
    """Model and final favourable rates and ratios over every case under review.

    Parameters
    ----------
    group_codes, levels
        Every case's group as an index into ``levels``.
    model_favourable
        Every case's model decision (reference model, operative lens).
    reviewed_rows
        Row (into the arrays above) of each effective review.
    reviewed_decided, reviewed_final_favourable
        Per review: not deferred, and its final decision.
    level, n_boot, seed
        Interval level, bootstrap replicates and seed.
    """
    codes = np.asarray(group_codes).astype(np.int64)
    G = len(levels)
    model = np.asarray(model_favourable).astype(bool)
    final = model.copy()
    rows = np.asarray(reviewed_rows).astype(np.int64)
    dec = np.asarray(reviewed_decided).astype(bool)
    final[rows[dec]] = np.asarray(reviewed_final_favourable).astype(bool)[dec]
    cell = (~model).astype(np.int64) * 2 + (~final).astype(np.int64)
    cells = np.bincount(codes * 4 + cell, minlength=4 * G).reshape(G, 4)
    n = cells.sum(axis=1)
    keep = n > 0
    cells, n = cells[keep], n[keep]
    names = [str(v) for v, k in zip(levels, keep, strict=True) if k]
    reviewed = np.bincount(codes[rows], minlength=G)[keep]
    decided = np.bincount(codes[rows[dec]], minlength=G)[keep]
    m = _rates(cells[:, 0] + cells[:, 1], n, level)
    f = _rates(cells[:, 0] + cells[:, 2], n, level)
    c_lo, c_hi, lc_lo, lc_hi = _bootstrap_changes(cells, m["ref"], f["ref"], n_boot, seed, level)
    out = [
        PopulationGroup(
            group=names[i],
            cases=int(n[i]),
            reviewed=int(reviewed[i]),
            decided=int(decided[i]),
            changed_to_favourable=int(cells[i, 2]),
            changed_to_unfavourable=int(cells[i, 1]),
            change=float(f["rate"][i] - m["rate"][i]),
            change_low=float(c_lo[i]),
            change_high=float(c_hi[i]),
            **_rate_fields("model", m, i),
            **_rate_fields("final", f, i),
        )
        for i in range(len(n))
    ]
    m_air, f_air = m["air"], f["air"]
    lowest_m = float(np.nanmin(m_air)) if np.isfinite(m_air).any() else np.nan
    lowest_f = float(np.nanmin(f_air)) if np.isfinite(f_air).any() else np.nan
    return PopulationEffect(
        rows=tuple(out),
        cases=int(n.sum()),
        reviewed=len(rows),
        decided=int(dec.sum()),
        model_reference=names[m["ref"]],
        final_reference=names[f["ref"]],
        lowest_model_air=lowest_m,
        lowest_final_air=lowest_f,
        lowest_air_change=lowest_f - lowest_m,
        lowest_air_change_low=float(lc_lo[0]),
        lowest_air_change_high=float(lc_hi[0]),
        level=level,
        notes=_notes(levels, keep, out),
    )


def _rates(k: NDArray[np.integer], n: NDArray[np.integer], level: float) -> dict[str, Any]:
    """Favourable counts ``k`` of ``n`` cases per group: rates with Wilson intervals, the
    highest-rate reference group, and adverse impact ratios with their intervals."""
    rate = proportion(k, n)
    low, high = wilson_interval(k, n, level)
    ref = int(np.argmax(rate))
    air = rate / rate[ref] if rate[ref] > 0 else np.full(len(n), np.nan)
    air_low, air_high, air_method = air_intervals(k, n, ref, level)
    return {
        "k": k,
        "rate": rate,
        "low": low,
        "high": high,
        "ref": ref,
        "air": air,
        "air_low": air_low,
        "air_high": air_high,
        "air_method": air_method,
    }


def _rate_fields(prefix: str, r: dict[str, Any], i: int) -> dict[str, Any]:
    """Group ``i``'s model or final fields of a :class:`PopulationGroup`."""
    air = float(r["air"][i])
    return {
        f"{prefix}_favourable": int(r["k"][i]),
        f"{prefix}_rate": float(r["rate"][i]),
        f"{prefix}_low": float(r["low"][i]),
        f"{prefix}_high": float(r["high"][i]),
        f"{prefix}_air": air,
        f"{prefix}_air_low": r["air_low"][i],
        f"{prefix}_air_high": r["air_high"][i],
        f"{prefix}_air_method": r["air_method"][i],
        f"{prefix}_flag": four_fifths_flag(air),
    }


def _bootstrap_changes(
    cells: NDArray[np.int64], ref_m: int, ref_f: int, n_boot: int, seed: int, level: float
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """Percentile intervals of each group's rate change and of the change in the lowest
    ratio, from a seeded bootstrap of each group's 2×2 cells."""
    rng = np.random.default_rng(seed)
    draws = bootstrap_cells(cells, n_boot, rng)
    bn = draws.sum(axis=2).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        bm = (draws[:, :, 0] + draws[:, :, 1]) / bn
        bf = (draws[:, :, 0] + draws[:, :, 2]) / bn
        low_change = np.nanmin(bf / bf[:, [ref_f]], axis=1) - np.nanmin(bm / bm[:, [ref_m]], axis=1)
    c_lo, c_hi = percentile_interval(bf - bm, level)
    lc_lo, lc_hi = percentile_interval(low_change[:, None], level)
    return c_lo, c_hi, lc_lo, lc_hi


def _notes(
    levels: Sequence[str], keep: NDArray[np.bool_], out: list[PopulationGroup]
) -> tuple[str, ...]:
    """Groups with no case under review, and ratios whose interval spans the 0.8 line."""
    notes: list[str] = []
    missing = [str(v) for v, k in zip(levels, keep, strict=True) if not k]
    if missing:
        notes.append(f"no case under review in group(s) {', '.join(missing)}")
    for r in out:
        for label, air, lo, hi in (
            ("model", r.model_air, r.model_air_low, r.model_air_high),
            ("final", r.final_air, r.final_air_low, r.final_air_high),
        ):
            if np.isfinite(lo) and np.isfinite(hi) and lo < FOUR_FIFTHS <= hi:
                notes.append(
                    f"group {r.group}: the {label} ratio over every case, {air:.2f}, has an "
                    f"interval ({lo:.2f} to {hi:.2f}) that spans 0.8: the flag is not settled"
                )
    return tuple(notes)
