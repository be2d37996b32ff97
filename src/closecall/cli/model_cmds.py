"""`closecall model`: every model's weights on the data's own scale (a thin view over
:meth:`closecall.api.study.Study.model`)."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import typer
from rich import box
from rich.table import Table
from rich.text import Text

from closecall.cli.common import ConfigOption, load
from closecall.cli.output import console, emit_json, safe_text


def _num(value: float, digits: int = 3) -> str:
    """Fixed digits; a rounded zero has no sign; very large or small in e-notation."""
    if not math.isfinite(value):
        return "—"
    if value != 0 and (abs(value) >= 1e5 or abs(value) < 10 ** (-digits)):
        return f"{value:.2e}"
    text = f"{value:.{digits}f}"
    return text.lstrip("-") if float(text) == 0 else text


def model(
    config: Path = ConfigOption,
    as_json: bool = typer.Option(False, "--json", help="Print the weights as JSON data."),
    level: float = typer.Option(0.95, "--level", help="Confidence level of the intervals."),
) -> None:
    """Show every model's weights: per unit of each numeric feature, per category against
    its reference level, with standard error, odds ratio and interval; the intercept and each
    lens's threshold. Group weights are marked [group], flagged proxies [proxy].

    Weights say how the model scores on average; they are evidence for review, not a
    finding that any one decision was right or wrong.

    \b
    Example:
      closecall model --config studies/grants/closecall.toml
    """
    from closecall.api.study import Study

    study = Study(load(config, quiet=as_json))
    data: dict[str, Any] = study.model(level).to_dict()
    if as_json:
        emit_json(data)
        return
    pct = f"{data['level']:.0%}"
    console.print(
        f"penalty {data['penalty']:g} (weights of a penalised fit are shrunk towards 0); "
        f"{pct} Wald intervals",
        markup=False,
        highlight=False,
        soft_wrap=True,
    )
    for lens, t in data["thresholds"].items():
        console.print(
            f"threshold under lens {safe_text(lens)}: {_num(t)} log-odds "
            f"(probability {1 / (1 + math.exp(-t)):.2f})",
            markup=False,
            highlight=False,
        )
    for m in data["models"]:
        fit = "" if m["fit"] == "all" else f" — fitted on group level {safe_text(m['fit'])}"
        table = Table(
            title=f"{m['model']}{fit}", box=box.SIMPLE, title_justify="left", pad_edge=False
        )
        for head in ("term", "weight", "se", "odds ratio", f"{pct} interval (odds ratio)"):
            table.add_column(head, justify="left" if head == "term" else "right")
        for r in m["rows"]:
            mark = " [group]" if r["group"] else (" [proxy]" if r["proxy"] else "")
            table.add_row(
                Text(safe_text(r["term"]) + mark),  # Text: "[group]" is not markup
                _num(r["weight"]),
                _num(r["se"]),
                _num(r["odds_ratio"]),
                f"{_num(r['or_low'])} to {_num(r['or_high'])}",
            )
        console.print(table)
    for name in data.get("imported", []):
        console.print(f"{name}: imported scores, no weights", markup=False, highlight=False)
    if data.get("scorecard"):
        card = data["scorecard"]
        console.print(
            f"{card['model']}: the scorecard {safe_text(card['file'])}, points instead of "
            "weights: closecall explain CASE shows them for a case (docs/scorecard.md)",
            markup=False,
            highlight=False,
        )


def register(app: typer.Typer) -> None:
    """Add `model` to the closecall app."""
    app.command("model")(model)
