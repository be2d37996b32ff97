"""`closecall init`: infer a starting study config from a data file."""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from closecall.core.errors import UserError
from closecall.setup.load import infer_kind, read_table

_OUTCOME_HINT = re.compile(
    r"(outcome|label|target|result|approved|granted|default|repaid|"
    r"completed|success|decision|deny|denied|y)$",
    re.I,
)
_FAVOURABLE_HINT = ("yes", "1", "true", "approved", "granted", "repaid", "completed", "good")
# An outcome named for a bad event (a denial, a default…): its "yes" is the unfavourable value.
_NEGATIVE_OUTCOME = re.compile(
    r"(deny|denied|denial|default|reject|refus|fail|late|arrear|fraud|churn|loss|bad)", re.I
)
_GROUP_HINT = re.compile(
    r"(race|ethnic|gender|sex|nationality|heritage|religion|origin|"
    r"disab|group|afam|black|minority)",
    re.I,
)


#: A group candidate has at most this many levels.
MAX_GROUP_LEVELS = 8
#: "Strongly associated" with a feature: Cramér's V or the correlation ratio at or above this
#: (the proxies' default flag, [proxies] association).
STRONG_ASSOCIATION = 0.3
ASSOCIATION_ROWS = 20_000


def _association(candidate: pd.Series, other: pd.Series) -> float:
    """Cramér's V (categorical ``other``) or the correlation ratio η (numeric ``other``)."""
    keep = candidate.notna().to_numpy() & other.notna().to_numpy()
    codes, _ = pd.factorize(candidate[keep])
    k = int(codes.max()) + 1 if len(codes) else 0
    if k < 2:
        return 0.0
    if pd.api.types.is_numeric_dtype(other) and not pd.api.types.is_bool_dtype(other):
        x = other[keep].to_numpy(dtype=float)
        total = float(((x - x.mean()) ** 2).sum())
        if total <= 0:
            return 0.0
        sums = np.bincount(codes, weights=x, minlength=k)
        counts = np.bincount(codes, minlength=k)
        means = sums / np.maximum(counts, 1)
        between = float((counts * (means - x.mean()) ** 2).sum())
        return float(np.sqrt(between / total))
    table = pd.crosstab(codes, pd.factorize(other[keep])[0]).to_numpy(dtype=float)
    if min(table.shape) < 2:
        return 0.0
    n = table.sum()
    expected = table.sum(1, keepdims=True) * table.sum(0, keepdims=True) / n
    chi2 = float(((table - expected) ** 2 / expected).sum())
    return float(np.sqrt(chi2 / (n * (min(table.shape) - 1))))


def group_candidates(
    frame: pd.DataFrame, reserved: set[str], limit: int = 10
) -> list[dict[str, object]]:
    """Columns that could hold the protected attribute, each with why (never chosen here).

    A candidate has few levels (2 to MAX_GROUP_LEVELS); it ranks higher when named like a
    protected attribute and when strongly associated with another column (a group attribute
    usually is, through its proxies). Returns ``{"column", "levels", "named_like", "associated"}``
    dicts, most likely first.
    """
    out: list[dict[str, object]] = []
    columns = [c for c in frame.columns if c not in reserved]
    # associations on at most ASSOCIATION_ROWS rows (seeded): a ranking hint, not a finding
    sample = (
        frame if len(frame) <= ASSOCIATION_ROWS else frame.sample(ASSOCIATION_ROWS, random_state=0)
    )
    for c in columns:
        levels = int(frame[c].nunique(dropna=True))
        if not 2 <= levels <= MAX_GROUP_LEVELS:
            continue
        strongest = sorted(
            ((_association(sample[c], sample[o]), o) for o in columns if o != c), reverse=True
        )
        associated = [
            {"column": o, "association": round(v, 2)}
            for v, o in strongest[:2]
            if v >= STRONG_ASSOCIATION
        ]
        out.append(
            {
                "column": c,
                "levels": levels,
                "named_like": bool(_GROUP_HINT.search(c)),
                "associated": associated,
            }
        )
    out.sort(key=lambda d: (not d["named_like"], not d["associated"], d["levels"]))
    return out[:limit]


def _why(candidate: dict[str, object]) -> str:
    parts = [f"{candidate['levels']} levels"]
    if candidate["named_like"]:
        parts.append("named like a protected attribute")
    assoc = candidate["associated"]
    if isinstance(assoc, list) and assoc:
        parts.append(
            "strongly associated with "
            + ", ".join(f"{a['column']} ({a['association']:.2f})" for a in assoc)
        )
    return f"{candidate['column']}: " + "; ".join(parts)


@dataclass
class Inference:
    """What `init` inferred and what the user must still decide."""

    text: str
    inferred: dict[str, object] = field(default_factory=dict)
    to_decide: list[str] = field(default_factory=list)


def _quote(value: object) -> str:
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    return str(value).lower() if isinstance(value, bool) else str(value)


def infer_config(
    data: Path, pending: Path | None = None, relative_to: Path | None = None
) -> Inference:
    """Look at a labelled data file and draft a commented closecall.toml."""
    frame = read_table(data)
    inf = Inference(text="")
    id_col = _guess_id(frame)
    outcome, two_valued = _guess_outcome(frame, id_col, pending)
    favourable = _favourable_value(frame, outcome) if outcome is not None else None
    candidates = group_candidates(frame, {c for c in (id_col, outcome) if c})
    undecided = {str(d["column"]) for d in candidates} | (
        set(two_valued) if outcome is None else set()
    )
    kinds = {c: infer_kind(frame[c]) for c in frame.columns if c not in (id_col, outcome)}
    rel = relative_to or data.parent
    lines = [
        "# closecall study config, drafted by 'closecall init'. Every key: docs/config.md",
        "# Check each value marked CHECK before you fit.",
        "",
        "[study]",
        f"name = {_quote(data.stem)}",
        "seed = 0",
        "",
        "[data]",
        f"history = {_quote(_rel(data, rel))}",
    ]
    if pending is not None:
        lines.append(f"pending = {_quote(_rel(pending, rel))}")
    else:
        lines.append('# pending = "pending.csv"   # without it, margins are cross-fitted')
    lines += _label_lines(inf, id_col, outcome, favourable, two_valued)
    lines += _group_lines(inf, candidates)
    lines += _kinds_lines(kinds, undecided)
    inf.inferred["kinds"] = kinds
    lines += _DEFAULT_TABLES
    inf.to_decide.append(
        "lens: the relative costs of a wrong favourable and a wrong unfavourable decision"
    )
    inf.inferred["rows"] = len(frame)
    inf.text = "\n".join(lines)
    if id_col is None and outcome is None:
        raise UserError(
            f"{data}: found neither an id column nor a two-valued outcome column",
            "is this the labelled history file?",
        )
    return inf


#: The tables a drafted config ends with: defaults the user reviews.
_DEFAULT_TABLES = [
    "",
    "[model]",
    "penalty = 1.0   # ridge strength on standardised features; 0 = unpenalised",
    "folds = 5",
    'reference = "pooled"',
    "",
    "[[lens]]   # DECIDE: the costs of the two kinds of error",
    'name = "equal-costs"',
    "cost_false_favourable = 1",
    "cost_false_unfavourable = 1",
    "",
    "[review]",
    "band = 0.5   # close calls: |margin| <= band, in log-odds",
    'ledger = "ledger.sqlite"',
    "reviewers = []   # logins that may record; empty = anyone",
    "analysts = []",
    "",
]


def _guess_id(frame: pd.DataFrame) -> str | None:
    """A unique column named like an id, else the first unique non-float column."""
    return next(
        (c for c in frame.columns if re.search(r"id$", c, re.I) and frame[c].is_unique), None
    ) or next(
        (
            c
            for c in frame.columns
            if frame[c].is_unique and not pd.api.types.is_float_dtype(frame[c])
        ),
        None,
    )


def _guess_outcome(
    frame: pd.DataFrame, id_col: str | None, pending: Path | None
) -> tuple[str | None, list[str]]:
    """The outcome column if one stands out, and the two-valued candidates."""
    two_valued = [c for c in frame.columns if frame[c].nunique(dropna=True) == 2 and c != id_col]
    outcome = None
    if pending is not None:  # the label is what history has and pending lacks
        pending_cols = set(read_table(pending).columns)
        only_history = [c for c in two_valued if c not in pending_cols]
        if len(only_history) == 1:
            outcome = only_history[0]
        elif only_history:
            two_valued = only_history
    if outcome is None:
        named = [c for c in two_valued if _OUTCOME_HINT.search(c)]
        outcome = named[0] if len(named) == 1 or (named and pending is None) else None
        if outcome is None and len(two_valued) == 1:
            outcome = two_valued[0]
    return outcome, two_valued


def _favourable_value(frame: pd.DataFrame, outcome: str) -> object:
    """The outcome value that looks good for the person (yes-like; the other one when the
    column names a bad event)."""
    values = list(pd.unique(frame[outcome].dropna()))
    yes_like = [v for v in values if str(v).strip().lower() in _FAVOURABLE_HINT]
    favourable: object
    if _NEGATIVE_OUTCOME.search(outcome) and len(values) == 2 and len(yes_like) == 1:
        favourable = next(v for v in values if v is not yes_like[0])
    else:
        favourable = yes_like[0] if yes_like else values[0]
    if hasattr(favourable, "item"):
        favourable = favourable.item()
    return favourable


def _label_lines(
    inf: Inference,
    id_col: str | None,
    outcome: str | None,
    favourable: object,
    two_valued: list[str],
) -> list[str]:
    """The [data] id, outcome and favourable lines; what was inferred and what to decide."""
    lines: list[str] = []
    if id_col:
        lines.append(f"id = {_quote(id_col)}")
        inf.inferred["id"] = id_col
    else:
        lines.append('# id = "..."   # DECIDE: a column with one unique value per case')
        inf.to_decide.append("id: no column has a unique value per row")
    if outcome:
        lines.append(f"outcome = {_quote(outcome)}   # CHECK")
        lines.append(f"favourable = {_quote(favourable)}   # CHECK: the good outcome")
        inf.inferred["outcome"] = outcome
        inf.inferred["favourable"] = favourable
        inf.to_decide.append(
            f"favourable: confirm that {outcome} = {favourable!r} is the good outcome for the "
            "person scored (margins > 0 then mean the favourable decision)"
        )
    else:
        lines.append('# outcome = "..."   # DECIDE: the two-valued label column')
        lines.append('# favourable = "..."')
        inf.to_decide.append(
            "outcome and favourable: which two-valued column is the label "
            f"(candidates: {', '.join(two_valued[:6]) or 'none'})"
        )
    return lines


def _group_lines(inf: Inference, candidates: list[dict[str, object]]) -> list[str]:
    """The commented group line with its candidates: the group is never chosen here (fit
    refuses the config until the user does)."""
    lines = ['# group = ["..."]   # CHOOSE the protected attribute column(s); candidates:']
    lines += [f"#   {_why(d)}" for d in candidates] or ["#   (no column has 2 to 8 levels)"]
    inf.inferred["group_candidates"] = [str(d["column"]) for d in candidates]
    inf.to_decide.append(
        'group: write group = ["..."] under [data] naming the protected attribute column(s) '
        "(ask your legal and data-protection officers whether it may be processed); "
        + (
            "candidates: " + " | ".join(_why(d) for d in candidates)
            if candidates
            else "no column has 2 to 8 levels"
        )
    )
    return lines


def _kinds_lines(kinds: dict[str, str], undecided: set[str]) -> list[str]:
    """The remaining [data] hints and the [kinds] table (columns that may not stay features
    commented out)."""
    lines = [
        "# features = [...]   # default: every other column",
        "# exclude = [...]    # columns to leave out",
        '# deployed_score = "..."   # probability column of the model in use',
        "",
        "[kinds]   # numeric or categorical, inferred from the data",
    ]
    lines += [
        f"{'# ' if c in undecided else ''}{_quote(c)} = {_quote(k)}"
        + ("   # if it stays a feature" if c in undecided else "")
        for c, k in kinds.items()
    ]
    return lines


def _rel(path: Path, base: Path) -> str:
    try:
        return str(path.resolve().relative_to(base.resolve()))
    except ValueError:
        return str(path.resolve())
