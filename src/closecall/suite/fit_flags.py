"""Fit flags: what the suite's fit checks found (see suite.FitFlags), and which touch a case.

A flag is a plain dict stored in the snapshot's meta (``fit_flags``): model, group (the split
model's level, else None), fit ("whole history" or "fold k of K"), fold (1-based or None), row
(the row of the model's fitted weights this fit is, when it scores cases under review, else
None), problem (a key of PROBLEM_WORDS), detail (one sentence), rows and columns of the fit.
With penalty 0 no flag is ever stored: such a fit is refused. docs/methods.md ("Convergence and
separation checks") explains each problem.

This module is light (no fitting code) so that the views can use it on a cached snapshot.
"""

from __future__ import annotations

from typing import Any

PROBLEM_WORDS = {
    "one_outcome": "one outcome value",
    "more_columns_than_rows": "more columns than rows",
    "complete_separation": "complete separation",
    "quasi_complete_separation": "quasi-complete separation",
    "separation_not_ruled_out": "separation not ruled out",
    "coefficient_past_bound": "a coefficient past the bound",
    "not_converged": "no convergence",
}


def snapshot_flags(snap: Any) -> list[dict[str, Any]]:
    """Every fit flag of a snapshot (none for a snapshot made before flags were kept)."""
    flags = snap.meta.get("fit_flags") or []
    return [f for f in flags if isinstance(f, dict)]


def case_fit_flags(snap: Any, row: int) -> list[dict[str, Any]]:
    """The flags of the fits that scored case ``row`` (one look-up per flagged model)."""
    flags = snapshot_flags(snap)
    out: list[dict[str, Any]] = []
    scored: dict[str, int] = {}
    for f in flags:
        model = str(f.get("model"))
        if f.get("row") is None or model not in snap.model_names:
            continue
        if model not in scored:
            _, rows = snap.weights(model)
            scored[model] = int(rows[row])
        if f["row"] == scored[model]:
            out.append(f)
    return out


def flag_label(flag: dict[str, Any]) -> str:
    """'split model, group 'B', fold 2 of 5: quasi-complete separation' (data text raw)."""
    who = f"{flag.get('model')} model"
    if flag.get("group") is not None:
        who += f", group '{flag['group']}'"
    problem = PROBLEM_WORDS.get(str(flag.get("problem")), str(flag.get("problem")))
    return f"{who}, {flag.get('fit')}: {problem}"


def fits_text(fits: list[str]) -> str:
    """'the whole history and folds 1, 3' from fit names."""
    whole = [f for f in fits if not f.startswith("fold")]
    folds = [f.split()[1] for f in fits if f.startswith("fold")]
    parts = ["the whole history"] if whole else []
    if folds:
        parts.append(("fold " if len(folds) == 1 else "folds ") + ", ".join(folds))
    return " and ".join(parts)


def grouped_flags(flags: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """One entry per (model, group, problem): its fits and the first fit's detail."""
    seen: dict[tuple[Any, Any, Any], dict[str, Any]] = {}
    for f in flags:
        key = (f.get("model"), f.get("group"), f.get("problem"))
        if key not in seen:
            seen[key] = {
                "model": key[0],
                "group": key[1],
                "problem": key[2],
                "fits": [],
                "detail": f.get("detail", ""),
            }
        seen[key]["fits"].append(str(f.get("fit")))
    return list(seen.values())
