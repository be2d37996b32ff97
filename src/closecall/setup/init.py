"""`closecall init`: infer a starting study config from a data file."""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

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
    n = len(frame)
    id_col = next(
        (c for c in frame.columns if re.search(r"id$", c, re.I) and frame[c].is_unique), None
    ) or next(
        (
            c
            for c in frame.columns
            if frame[c].is_unique and not pd.api.types.is_float_dtype(frame[c])
        ),
        None,
    )
    two_valued = [c for c in frame.columns if frame[c].nunique(dropna=True) == 2 and c != id_col]
    outcome = next((c for c in two_valued if _OUTCOME_HINT.search(c)), None)
    favourable: object = None
    if outcome is not None:
        values = list(pd.unique(frame[outcome].dropna()))
        yes_like = [v for v in values if str(v).strip().lower() in _FAVOURABLE_HINT]
        if _NEGATIVE_OUTCOME.search(outcome) and len(values) == 2 and len(yes_like) == 1:
            favourable = next(v for v in values if v is not yes_like[0])
        else:
            favourable = yes_like[0] if yes_like else values[0]
        if hasattr(favourable, "item"):
            favourable = favourable.item()
    group = [c for c in frame.columns if _GROUP_HINT.search(c) and c not in (id_col, outcome)]
    features = [c for c in frame.columns if c not in (id_col, outcome, *group)]
    kinds = {c: infer_kind(frame[c]) for c in features}

    rel = relative_to or data.parent
    hist_rel = _rel(data, rel)
    lines = [
        "# closecall study config, drafted by 'closecall init'. Every key: docs/config.md",
        "# Check each value marked CHECK before you fit.",
        "",
        "[study]",
        f"name = {_quote(data.stem)}",
        "seed = 0",
        "",
        "[data]",
        f"history = {_quote(hist_rel)}",
    ]
    if pending is not None:
        lines.append(f"pending = {_quote(_rel(pending, rel))}")
    else:
        lines.append('# pending = "pending.csv"   # without it, margins are cross-fitted')
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
    if group:
        lines.append(f"group = [{', '.join(_quote(g) for g in group)}]   # CHECK")
        inf.inferred["group"] = group
        inf.to_decide.append(
            f"group: confirm {', '.join(group)} is the protected attribute and that your legal "
            "and data-protection officers allow processing it"
        )
    else:
        lines.append('# group = ["..."]   # DECIDE: the protected attribute column(s)')
        inf.to_decide.append(
            "group: which column(s) hold the protected attribute (ask your legal and "
            "data-protection officers whether it may be processed)"
        )
    lines.append("# features = [...]   # default: every other column")
    lines.append("# exclude = [...]    # columns to leave out")
    lines.append('# deployed_score = "..."   # probability column of the model in use')
    lines += ["", "[kinds]   # numeric or categorical, inferred from the data"]
    lines += [f"{_quote(c)} = {_quote(k)}" for c, k in kinds.items()]
    inf.inferred["kinds"] = kinds
    lines += [
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
    inf.to_decide.append(
        "lens: the relative costs of a wrong favourable and a wrong unfavourable decision"
    )
    inf.inferred["rows"] = n
    inf.text = "\n".join(lines)
    if id_col is None and outcome is None:
        raise UserError(
            f"{data}: found neither an id column nor a two-valued outcome column",
            "is this the labelled history file?",
        )
    return inf


def _rel(path: Path, base: Path) -> str:
    try:
        return str(path.resolve().relative_to(base.resolve()))
    except ValueError:
        return str(path.resolve())
